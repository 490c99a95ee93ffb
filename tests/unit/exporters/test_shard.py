"""Sharding a site across instances: rendezvous hashing on device names.

The properties checked are those of highest-random-weight hashing (Thaler and
Ravishankar, "A name-based mapping scheme for rendezvous", 1996/98; from memory): every
name has exactly one owner, the load is even, and adding an instance moves only the
names the new instance wins.
"""

from __future__ import annotations

import subprocess
import sys

import pytest
import yaml

from lightwarden.exporters.app.config import ConfigError, parse_config
from lightwarden.exporters.app.shard import mine, owner
from lightwarden.exporters.app.wiring import my_devices

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
