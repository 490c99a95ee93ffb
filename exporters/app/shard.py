"""Which instance polls which device: rendezvous (highest random weight) hashing.

Each device goes to the instance with the highest hash of (instance index, device name).
Adding an instance moves only the devices that the new instance now wins, about 1/n of
them, and every instance computes the same answer from the device list alone, with no
coordination. The hash is BLAKE2b, not Python's hash(), so the answer is the same in
every process and on every machine.
"""

from __future__ import annotations

import hashlib


def _weight(instance: int, device: str) -> int:
    digest = hashlib.blake2b(f"{instance}\x00{device}".encode(), digest_size=8).digest()
    return int.from_bytes(digest, "big")


def owner(device: str, count: int) -> int:
    """The index (0..count-1) of the instance that polls ``device``."""
    if count < 1:
        raise ValueError("shard count must be at least 1")
    return max(range(count), key=lambda i: _weight(i, device))


def mine(devices: list[str], index: int, count: int) -> list[str]:
    """The devices instance ``index`` of ``count`` polls, in their given order."""
    return [d for d in devices if owner(d, count) == index]
