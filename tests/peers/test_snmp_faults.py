"""The SNMP source when things go wrong: silence, wrong community, bad rows, restarts.

All traffic is to 127.0.0.1: a real net-snmp snmpd (fixtures/snmpd) or a bound UDP
socket that never answers. Waits are bounded, never asserted as speeds.
"""

from __future__ import annotations

import asyncio
import socket

import pytest
from support.snmpd import SnmpdAgent, start_snmpd

from lightwarden.collector.readings import PollOutcome, Quantity, ReadingStatus
from lightwarden.collector.schedule import PollScheduler
from lightwarden.collector.snmp import EnginePool, SnmpCredentials, SnmpSource

pytestmark = pytest.mark.external

SLACK = 15.0  # added to the expected worst case so a loaded machine cannot hang the test


@pytest.fixture(scope="module")
def agent(tmp_path_factory):
    snmpd = start_snmpd(tmp_path_factory.mktemp("snmpd"))
    yield snmpd
    snmpd.stop()


@pytest.fixture
def silent_port():
    """A UDP port on loopback that is bound (so nothing else takes it) and never answers."""
    sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sock.bind(("127.0.0.1", 0))
    yield sock.getsockname()[1]
    sock.close()


def run(coro):
    return asyncio.run(coro)


async def _poll(port: int, credentials: SnmpCredentials, timeout: float, retries: int,
                name: str = "hgl-quiet-01") -> PollOutcome:  # fmt: skip
    pool = EnginePool()
    source = SnmpSource(name, "127.0.0.1", credentials, port=port, timeout=timeout,
                        retries=retries, engines=pool)  # fmt: skip
    try:
        # notes/snmp.md: the error arrives after timeout x (retries + 1)
        return await asyncio.wait_for(source.poll(5.0), timeout * (retries + 1) + SLACK)
    finally:
        pool.close()


def test_silent_agent_times_out_within_bound(silent_port):
    outcome = run(_poll(silent_port, SnmpCredentials.v2c("hgl-ro-secret"), 0.4, 1))
    assert not outcome.ok and outcome.batch is None
    assert outcome.error_kind == "timeout"
    assert outcome.error.startswith("hgl-quiet-01: ")
    assert f"127.0.0.1:{silent_port}" in outcome.error and "2 tries" in outcome.error
    assert "hgl-ro-secret" not in outcome.error and "Traceback" not in outcome.error
    assert outcome.started_at == 5.0


def test_silent_v3_agent_times_out_without_leaking_keys(silent_port):
    creds = SnmpCredentials.v3("hgl-poller", "auth-key-do-not-show", "priv-key-do-not-show")
    outcome = run(_poll(silent_port, creds, 0.3, 0))
    assert outcome.error_kind == "timeout" and "1 tries" in outcome.error
    assert "do-not-show" not in outcome.error
    assert "do-not-show" not in repr(creds)


def test_wrong_community_looks_like_a_timeout(agent):
    # notes/snmp.md: a wrong community is silently dropped; the client sees a timeout
    outcome = run(_poll(agent.port, SnmpCredentials.v2c("hgl-not-the-community"), 0.4, 0))
    assert outcome.error_kind == "timeout"
    assert "community" in outcome.error  # the hint that this may be a credentials problem
    assert "hgl-not-the-community" not in outcome.error


def _rows(outcome: PollOutcome) -> dict[tuple[str, Quantity, int], tuple]:
    assert outcome.ok, outcome.error
    return {(o.port, q, lane): (status, value, note)
            for o, lane, q, value, status, note in outcome.batch.rows()}  # fmt: skip


def test_unavailable_and_garbage_rows(agent):
    outcome = run(_poll(agent.port, SnmpCredentials.v2c(agent.community), 2.0, 1))
    rows = _rows(outcome)
    # dataset: sfp2 bias lane 4 has entPhySensorOperStatus unavailable(2), value 0
    status, _, note = rows[("sfp2", Quantity.BIAS, 4)]
    assert status is ReadingStatus.UNAVAILABLE and "unavailable" in note
    # dataset: sfp2 Tx power lane 4 is an OctetString "-7.91" where an Integer belongs
    status, _, note = rows[("sfp2", Quantity.TX_POWER, 4)]
    assert status is ReadingStatus.INVALID and "-7.91" in note and "not an integer" in note
    # the rest of the optic is still read
    assert rows[("sfp2", Quantity.TX_POWER, 3)][0] is ReadingStatus.OK
    assert rows[("sfp2", Quantity.TEMPERATURE, 0)][0] is ReadingStatus.OK


def test_rediscovers_after_agent_restart_and_inventory_change(tmp_path):
    # entLastChangeTime (ENTITY-MIB) changes when the entity tree changes; sysUpTime going
    # backwards means the agent restarted. Either must make the source read the layout again.
    first = start_snmpd(tmp_path / "a")
    second: SnmpdAgent | None = None
    try:
        creds = SnmpCredentials.v2c(first.community)

        async def main():
            nonlocal second
            pool = EnginePool()
            source = SnmpSource("hgl-edge-02", "127.0.0.1", creds, port=first.port,
                                timeout=1.0, retries=2, engines=pool)  # fmt: skip
            try:
                a = await source.poll(1.0)
                b = await source.poll(2.0)
                assert (a.ok, b.ok, source.discoveries) == (True, True, 1)
                first.stop()
                # restarted with a new part in sfp1: new serial, entLastChangeTime moved
                second = await asyncio.to_thread(
                    start_snmpd, tmp_path / "b", like=first, replace={
                        '1.3.6.1.2.1.47.1.4.1.0 timeticks 4200':
                        '1.3.6.1.2.1.47.1.4.1.0 timeticks 9900',
                        '"HGW10LR00017"': '"HGW10LR00099"',
                    })  # fmt: skip
                c = await source.poll(3.0)
                return a, c, source.discoveries
            finally:
                pool.close()

        a, c, discoveries = run(main())
        assert c.ok, c.error
        assert discoveries == 2
        assert a.batch.optics[0].serial == "HGW10LR00017"
        assert c.batch.optics[0].serial == "HGW10LR00099"
    finally:
        first.stop()
        if second is not None:
            second.stop()


def _point_at(source: SnmpSource, port: int, timeout: float, retries: int) -> None:
    """Redirect both of a source's sessions (pysnmp's and the fast v2c one)."""
    for session in (source._session, source._steady):
        session.port = port
        session.timeout, session.retries = timeout, retries
    source._session._target = None
    source._steady._address = None  # type: ignore[union-attr]


def test_failed_poll_keeps_the_inventory(agent, silent_port):
    # A timeout says nothing about the modules fitted: the next poll must not pay a full
    # rediscovery when sysUpTime and entLastChangeTime say nothing changed.
    async def main():
        pool = EnginePool()
        source = SnmpSource("hgl-edge-02", "127.0.0.1", SnmpCredentials.v2c(agent.community),
                            port=agent.port, timeout=1.0, retries=1, engines=pool)  # fmt: skip
        try:
            assert source.fast_path
            assert (await source.poll(1.0)).ok
            kept = source.inventory
            assert kept is not None
            _point_at(source, silent_port, 0.3, 0)
            failed = await source.poll(2.0)
            assert failed.error_kind == "timeout" and source.inventory is kept
            _point_at(source, agent.port, 2.0, 1)
            again = await source.poll(3.0)
            return again, source.discoveries
        finally:
            source.close()
            pool.close()

    again, discoveries = run(main())
    assert again.ok and discoveries == 1


def test_one_failing_device_does_not_stop_the_others(agent, silent_port):
    outcomes: list[PollOutcome] = []

    async def main():
        pool = EnginePool()
        good = SnmpSource("hgl-edge-02", "127.0.0.1", SnmpCredentials.v2c(agent.community),
                          port=agent.port, timeout=2.0, retries=1, engines=pool)
        dead = SnmpSource("hgl-dead-09", "127.0.0.1", SnmpCredentials.v2c("hgl-x"),
                          port=silent_port, timeout=0.3, retries=0, engines=pool)
        wrong = SnmpSource("hgl-edge-03", "127.0.0.1", SnmpCredentials.v2c("hgl-wrong"),
                           port=agent.port, timeout=0.3, retries=0, engines=pool)
        sched = PollScheduler([good, dead, wrong], interval_s=0.2, on_outcome=outcomes.append,
                              backoff_cap_s=0.4)  # fmt: skip
        sched.start()

        async def enough():
            while not (
                sum(o.ok for o in outcomes if o.device == "hgl-edge-02") >= 4
                and any(o.device == "hgl-dead-09" for o in outcomes)
                and any(o.device == "hgl-edge-03" for o in outcomes)
            ):
                await asyncio.sleep(0.05)

        try:
            await asyncio.wait_for(enough(), 60)
        finally:
            await sched.shutdown(timeout_s=10)
            pool.close()
        return sched

    sched = run(main())
    by_device: dict[str, list[PollOutcome]] = {}
    for o in outcomes:
        by_device.setdefault(o.device, []).append(o)
    assert all(o.ok for o in by_device["hgl-edge-02"])
    assert all(o.error_kind == "timeout" for o in by_device["hgl-dead-09"])
    assert all(o.error_kind == "timeout" for o in by_device["hgl-edge-03"])
    assert sched.devices["hgl-dead-09"].consecutive_failures >= 1
    assert sched.devices["hgl-edge-02"].consecutive_failures == 0
