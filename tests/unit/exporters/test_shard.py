"""Sharding a site across instances: linked devices together, rendezvous-hashed.

The properties checked are those of highest-random-weight hashing (Thaler and
Ravishankar, "A name-based mapping scheme for rendezvous", 1996/98; from memory): every
name has exactly one owner, the load is even, and adding an instance moves only the
names the new instance wins. Components are those of an undirected graph (textbook
union-find; checked against a plain breadth-first search here): both ends of every link
must land on the same instance.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from hypothesis import given
from hypothesis import strategies as st

from lightwarden.exporters.app.cli import main as cli_main
from lightwarden.exporters.app.config import ConfigError, load_config, parse_config
from lightwarden.exporters.app.shard import components, mine, owner, owners
from lightwarden.exporters.app.wiring import as_instance, my_devices

REPO = Path(__file__).resolve().parents[3]

NAMES = [f"sw-{i:04d}" for i in range(3000)]


def test_every_device_has_exactly_one_owner_and_load_is_even():
    shards = [mine(NAMES, i, 3) for i in range(3)]
    assert sorted(n for s in shards for n in s) == sorted(NAMES)
    for s in shards:
        # 1000 expected; +-10 % is over 5 standard deviations of a fair split
        assert 900 <= len(s) <= 1100, [len(x) for x in shards]


def test_adding_an_instance_moves_only_what_the_new_one_wins():
    before = {n: owner(n, 3) for n in NAMES}
    after = {n: owner(n, 4) for n in NAMES}
    moved = [n for n in NAMES if before[n] != after[n]]
    assert all(after[n] == 3 for n in moved)
    assert 0.2 * len(NAMES) <= len(moved) <= 0.3 * len(NAMES)  # about 1/4


def test_same_answer_in_another_process():
    code = ("from lightwarden.exporters.app.shard import owner;"
            "print([owner(f'sw-{i:04d}', 5) for i in range(50)])")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, env={"PYTHONHASHSEED": "123"}).stdout
    assert out.strip() == str([owner(f"sw-{i:04d}", 5) for i in range(50)])


def _cfg(index: int, count: int) -> str:
    return yaml.safe_dump({
        "shard": {"index": index, "count": count},
        "credentials": {"c": {"snmp_v2c": {"community": {"env": "UNUSED"}}}},
        "devices": [{"name": n, "host": "127.0.0.1", "credentials": "c"} for n in NAMES[:60]],
    })


def test_monitor_polls_only_its_shard():
    polled = [{d.name for d in my_devices(parse_config(_cfg(i, 3)))} for i in range(3)]
    assert set().union(*polled) == set(NAMES[:60])
    assert sum(len(p) for p in polled) == 60


def test_shard_index_must_be_below_count():
    with pytest.raises(ConfigError) as err:
        parse_config(_cfg(3, 3), "site.yaml")
    assert "shard: index 3 must be below count 3" in str(err.value)


def _bfs_components(devices, links):
    """Reference: components by breadth-first search, each as a frozenset."""
    nbrs = {d: set() for d in devices}
    for a, b in links:
        nbrs.setdefault(a, set()).add(b)
        nbrs.setdefault(b, set()).add(a)
    seen, out = set(), set()
    for d in devices:
        if d in seen:
            continue
        todo, comp = [d], set()
        while todo:
            x = todo.pop()
            if x not in comp:
                comp.add(x)
                todo.extend(nbrs[x] - comp)
        seen |= comp
        out.add(frozenset(c for c in comp if c in set(devices)))
    return out


names = st.sampled_from([f"qm-sw-{i:02d}" for i in range(40)])


@given(st.lists(names, min_size=1, max_size=40, unique=True),
       st.lists(st.tuples(names, names), max_size=60), st.integers(1, 5))  # fmt: skip
def test_links_never_straddle_instances(devices, links, count):
    links = [(a, b) for a, b in links if a in devices and b in devices]
    won = owners(devices, count, links)
    assert set(won) == set(devices) and all(0 <= i < count for i in won.values())
    for a, b in links:
        assert won[a] == won[b], (a, b)
    of = components(devices, links)
    grouped: dict[str, set[str]] = {}
    for d, first in of.items():
        grouped.setdefault(first, set()).add(d)
    assert {frozenset(g) for g in grouped.values()} == _bfs_components(devices, links)
    assert all(first == min(g) for first, g in grouped.items())  # named by first name


def test_adding_an_instance_moves_only_whole_components_to_it():
    # 3000 switches in pairs (a link each): the pair moves together or not at all.
    links = [(NAMES[i], NAMES[i + 1]) for i in range(0, len(NAMES), 2)]
    before, after = owners(NAMES, 3, links), owners(NAMES, 4, links)
    moved = [n for n in NAMES if before[n] != after[n]]
    assert all(after[n] == 3 for n in moved)
    assert all((a in moved) == (b in moved) for a, b in links)
    assert 0.2 * len(NAMES) <= len(moved) <= 0.3 * len(NAMES)


@pytest.mark.parametrize("count", [2, 3])
def test_lab_plant_keeps_every_link_on_one_instance(count):
    cfg = load_config(REPO / "fixtures" / "site.yaml")
    ends = [(sp.a.split()[0], sp.b.split()[0]) for sp in cfg.plant]
    assert ends  # the lab's plant records
    shards = [{d.name for d in my_devices(as_instance(cfg.model_copy(update={
        "shard": cfg.shard.model_copy(update={"count": count})}), i))}
        for i in range(count)]  # fmt: skip
    assert sorted(n for s in shards for n in s) == sorted(d.name for d in cfg.devices)
    for a, b in ends:
        assert [a in s for s in shards] == [b in s for s in shards], (a, b)
    # By name alone the lab's core pair would be split at both counts.
    assert any(owner(a, count) != owner(b, count) for a, b in ends)


def test_instance_config_offsets_the_port_and_checks_the_index():
    cfg = parse_config(_cfg(0, 3))
    assert (as_instance(cfg, 2).shard.index, as_instance(cfg, 2).listen.port) == (2, 9819)
    assert as_instance(cfg, 2, listen_port=9900).listen.port == 9900
    with pytest.raises(ConfigError, match="--shard-index 3 must be from 0 to"):
        as_instance(cfg, 3)


def test_run_with_a_shard_index_beyond_the_count_is_a_clear_error(tmp_path, capsys):
    site = tmp_path / "site.yaml"
    site.write_text(_cfg(0, 2))
    assert cli_main(["run", "-c", str(site), "--shard-index", "2"]) == 2
    err = capsys.readouterr().err
    assert "lightwarden run: --shard-index 2 must be from 0 to shard.count - 1 (1)" in err


def test_template_unit_runs_one_shard_per_instance():
    unit = (REPO / "deploy" / "systemd" / "lightwarden@.service").read_text()
    lines = {ln.split("=", 1)[0]: ln.split("=", 1)[1] for ln in unit.splitlines()
             if "=" in ln and not ln.startswith("#")}  # fmt: skip
    assert lines["ExecStart"].endswith("run -c /etc/lightwarden/site.yaml --shard-index %i")
    assert lines["StateDirectory"] == "lightwarden/%i"
    assert lines["WorkingDirectory"] == "/var/lib/lightwarden/%i"
