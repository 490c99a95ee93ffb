"""Discovery decisions of the SNMP source that need no agent: which entity rows to read,
and whether sysUpTime says the agent restarted.

Sources: ENTITY-MIB (RFC 6933) entPhysicalClass values (chassis 3, fan 7, sensor 8,
module 9, port 10) and containment; RFC 2578 section 7.1.8 TimeTicks (hundredths of a
second, unsigned 32-bit, so sysUpTime wraps after 2^32 / 100 s, about 497.1 days).
"""

from __future__ import annotations

from lightwarden.collector.snmp.inventory import (
    ENT_CLASS,
    ENT_CONTAINED_IN,
    rows_to_read,
)
from lightwarden.collector.snmp.source import TICKS_WRAP, agent_restarted


def test_only_transceivers_in_ports_their_ports_and_sensors_are_read():
    # chassis 1 holds port 10 (with transceiver 20 and its sensors 30, 31, one level
    # deeper 32 under a sub-entity 25), a fan 40 with its own sensor 41, and a line card
    # 50 (a module, but not in a port) with a sensor 51.
    classes = {1: 3, 10: 10, 20: 9, 25: 1, 30: 8, 31: 8, 32: 8, 40: 7, 41: 8, 50: 9, 51: 8}
    parents = {1: 0, 10: 1, 20: 10, 25: 20, 30: 20, 31: 20, 32: 25, 40: 1, 41: 40, 50: 1,
               51: 50}  # fmt: skip
    tree = {ENT_CLASS: {(k,): v for k, v in classes.items()},
            ENT_CONTAINED_IN: {(k,): v for k, v in parents.items()}}  # fmt: skip
    rows = rows_to_read(tree)
    assert rows.modules == (20,)
    assert rows.sensors == (30, 31, 32)
    assert rows.named == (10, 30, 31, 32)


def test_sysuptime_wrap_is_not_a_restart():
    assert TICKS_WRAP == 4_294_967_296
    # 100 ticks before the wrap, then 2 s later: 100 + 100 ticks forward, mod 2^32.
    assert not agent_restarted(TICKS_WRAP - 100, 100, elapsed_s=2.0)
    # A restart 1 s after a poll: uptime 500 s in, far more than 1 s of ticks forward.
    assert agent_restarted(TICKS_WRAP - 100, 50_000, elapsed_s=1.0)
    assert agent_restarted(1_000_000, 500, elapsed_s=10.0)
    assert not agent_restarted(500, 1_000_000, elapsed_s=10.0)  # forward: not a restart
    assert not agent_restarted(None, 5, elapsed_s=1.0)
