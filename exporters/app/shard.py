"""Which instance polls which device: linked devices together, rendezvous-hashed.

Devices joined by known links (the plant's spans, each a pair of device ends) form
connected components; a component goes whole to one instance, so both ends of every
known link are polled by the same instance and span loss, far-end advice and one-cause
alerts never straddle instances.

Each component goes to the instance with the highest hash of (instance index, the
component's first device name in sorted order): rendezvous (highest random weight)
hashing. Adding an instance moves only the components that the new instance now wins,
about 1/n of them, and every instance computes the same answer from the device list
and plant alone, with no coordination. The hash is BLAKE2b, not Python's hash(), so the
answer is the same in every process and on every machine. A device with no known link
is a component of its own, so an unlinked site shards exactly as by device name.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable

Link = tuple[str, str]


def _weight(instance: int, device: str) -> int:
    digest = hashlib.blake2b(f"{instance}\x00{device}".encode(), digest_size=8).digest()
    return int.from_bytes(digest, "big")


def owner(device: str, count: int) -> int:
    """The index (0..count-1) of the instance that wins the name ``device``."""
    if count < 1:
        raise ValueError("shard count must be at least 1")
    return max(range(count), key=lambda i: _weight(i, device))


def components(devices: Iterable[str], links: Iterable[Link] = ()) -> dict[str, str]:
    """Each device's component, named by the component's first device name (sorted).

    Link ends naming devices not in ``devices`` still join the devices they link (a link
    through a device polled by no one keeps its neighbours together).
    """
    parent: dict[str, str] = {}

    def root(name: str) -> str:
        parent.setdefault(name, name)
        while parent[name] != name:
            parent[name] = parent[parent[name]]  # path halving keeps the trees flat
            name = parent[name]
        return name

    names = list(devices)
    for name in names:
        root(name)
    for a, b in links:
        ra, rb = root(a), root(b)
        if ra != rb:
            # The smaller name becomes the root, so a root is its component's first name.
            parent[max(ra, rb)] = min(ra, rb)
    return {name: root(name) for name in names}


def owners(devices: Iterable[str], count: int, links: Iterable[Link] = ()) -> dict[str, int]:
    """Device -> index of the instance that polls it."""
    if count < 1:
        raise ValueError("shard count must be at least 1")
    of = components(devices, links)
    by_component = {first: owner(first, count) for first in set(of.values())}
    return {name: by_component[first] for name, first in of.items()}


def mine(devices: list[str], index: int, count: int, links: Iterable[Link] = ()) -> list[str]:
    """The devices instance ``index`` of ``count`` polls, in their given order."""
    won = owners(devices, count, links)
    return [d for d in devices if won[d] == index]
