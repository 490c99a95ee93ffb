"""Our v2c steady-poll path (collector/snmp/fast.py) against pysnmp's, net-snmp and the lab.

Reference readers: pysnmp (the same source with ``fast_path=False``) and net-snmp's C
``snmpbulkwalk`` (support/snmp_check.py, RFC 3433 conversion written out by hand). Agents:
net-snmp snmpd serving a 48-port switch (672 sensors, multi-byte entity indexes) and the
lab's SNMP agent. The last tests use a plain loopback UDP socket that answers with broken
datagrams, since no real agent sends them.
"""

from __future__ import annotations

import asyncio
import json
import socket
import threading

import pytest
from support import snmp_check as _snmp_check
from support.snmpd import start_snmpd
from support.snmpd_switch import switch_dataset

from lightwarden.collector.readings import PollOutcome
from lightwarden.collector.snmp import EnginePool, SnmpCredentials, SnmpSource
from lightwarden.collector.snmp.fast import FastSession, SocketPool
from lightwarden.collector.snmp.session import SnmpError
from lightwarden.collector.snmp.wire import oid_bytes, tlv
from lightwarden.exporters.app.cli import main as cli_main
from lightwarden.fixtures.lab.model import LAB_COMMUNITY

pytestmark = pytest.mark.external

PMD_NAMES = ("100GBASE-LR4", "10GBASE-LR", "1000BASE-LX", "10GBASE-SR", "10GBASE-ER",
             "400GBASE-FR4", "400GBASE-DR4", "100GBASE-SR4")  # fmt: skip


@pytest.fixture(scope="module")
def big_agent(tmp_path_factory):
    agent = start_snmpd(tmp_path_factory.mktemp("snmpd48"), dataset=switch_dataset(48))
    yield agent
    agent.stop()


@pytest.fixture(scope="module")
def snmpd_small(tmp_path_factory):
    agent = start_snmpd(tmp_path_factory.mktemp("snmpd"))
    yield agent
    agent.stop()


def poll_both(host: str, port: int, creds: SnmpCredentials, device: str, polls: int = 2,
              ) -> dict[bool, list[PollOutcome]]:  # fmt: skip
    """Each path polls ``polls`` times; {fast_path: outcomes}."""

    async def main():
        pool, sockets = EnginePool(), SocketPool()
        out: dict[bool, list[PollOutcome]] = {}
        try:
            for fast in (True, False):
                source = SnmpSource(device, host, creds, port=port, timeout=3.0, retries=1,
                                    engines=pool, sockets=sockets, pmd_names=PMD_NAMES,
                                    fast_path=fast)  # fmt: skip
                assert source.fast_path is fast
                out[fast] = [await source.poll(1_800_000_000.0 + i) for i in range(polls)]
        finally:
            sockets.close()
            pool.close()
        return out

    return asyncio.run(main())


def same_batches(a: PollOutcome, b: PollOutcome) -> None:
    assert a.ok and b.ok, (a.error, b.error)
    assert a.batch.optics == b.batch.optics
    rows_a, rows_b = _snmp_check.collector_rows(a), _snmp_check.collector_rows(b)
    assert rows_a.keys() == rows_b.keys()
    for key, (status, value, note) in rows_a.items():
        other = rows_b[key]
        assert (status, note) == (other[0], other[2]), key
        assert value == other[1] or (value != value and other[1] != other[1]), key


def test_48_port_switch_reads_the_same_on_both_paths_and_in_net_snmp(big_agent):
    creds = SnmpCredentials.v2c(big_agent.community)
    got = poll_both("127.0.0.1", big_agent.port, creds, "qm-agg-48")
    fast, slow = got[True], got[False]
    assert len(fast[0].batch) == 48 * 14
    for a, b in zip(fast, slow, strict=True):
        same_batches(a, b)
    expected = _snmp_check.expected_readings(big_agent.address, big_agent.v2c_args())
    _snmp_check.assert_agrees(fast[1], expected)
    # qsfp7, 14, ... are down in the dataset (ifOperStatus 2)
    assert [o.oper_up for o in fast[1].batch.optics][6] is False


def test_discovery_reads_the_tree_first_then_only_optic_rows(big_agent):
    # Walking the whole entPhysicalTable (8 columns x 769 entities), the sensor table's 4
    # static columns (672 rows) and 5 IF-MIB columns (48 rows) is 9,080 varbinds before
    # GETBULK overshoot; tree first, then chosen rows, must read well under that.
    async def main():
        source = SnmpSource("qm-agg-48", "127.0.0.1", SnmpCredentials.v2c(big_agent.community),
                            port=big_agent.port, pmd_names=PMD_NAMES)  # fmt: skip
        try:
            first = await source.poll(1.0)
            return first, source._session.varbinds
        finally:
            source.close()

    first, discovery = asyncio.run(main())
    assert first.ok and len(first.batch) == 48 * 14
    assert discovery < 0.7 * 9_080, discovery


def test_v3_stays_on_pysnmp(big_agent):
    creds = SnmpCredentials.v3(big_agent.v3user, big_agent.authkey, big_agent.privkey)
    source = SnmpSource("qm-agg-48", "127.0.0.1", creds, port=big_agent.port)
    try:
        assert not source.fast_path
    finally:
        source.close()


def test_lab_devices_read_the_same_on_both_paths(lab_snmp_agent):
    agent = lab_snmp_agent(30, ("qm-core-a", "qm-core-b"))
    for device in ("qm-core-a", "qm-core-b"):
        host, port = agent.endpoint(device)
        got = poll_both(host, port, SnmpCredentials.v2c(LAB_COMMUNITY), device, polls=1)
        same_batches(got[True][0], got[False][0])
        assert len(got[True][0].batch) > 0


class BrokenAgent:
    """A loopback UDP socket answering every request with ``reply(request)``."""

    def __init__(self, reply):
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.settimeout(0.2)
        self.port = self.sock.getsockname()[1]
        self.reply = reply
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _serve(self):
        while not self.stop.is_set():
            try:
                data, addr = self.sock.recvfrom(65535)
            except TimeoutError:
                continue
            answer = self.reply(data)
            if answer is not None:
                self.sock.sendto(answer, addr)

    def close(self):
        self.stop.set()
        self.thread.join(5)
        self.sock.close()


def answer(request: bytes, varbinds: bytes) -> bytes:
    """A Response-PDU echoing the request's header (request-id) with ``varbinds``."""
    # request: 30 L 02 01 01 04 Lc community A0|A5 L <request-id TLV> ...
    community_len = request[6]
    pdu = request[7 + community_len :]
    rid_len = pdu[3]
    rid = pdu[2 : 4 + rid_len]
    body = rid + b"\x02\x01\x00\x02\x01\x00" + tlv(0x30, varbinds)
    head = request[2 : 7 + community_len]
    return tlv(0x30, head + tlv(0xA2, body))


def vb(oid: str, value: bytes) -> bytes:
    return tlv(0x30, tlv(0x06, oid_bytes(oid)) + value)


def run_session(port: int, call, timeout: float = 0.5):
    async def main():
        pool = SocketPool()
        try:
            session = FastSession(pool, SnmpCredentials.v2c("quillmoor-ro"), "127.0.0.1", port,
                                  timeout=timeout, retries=1)  # fmt: skip
            return await call(session)
        finally:
            pool.close()

    return asyncio.run(main())


@pytest.mark.parametrize("cut", [1, 5, 9])
def test_truncated_answer_is_a_protocol_error(cut):
    good = vb("1.3.6.1.2.1.1.3.0", b"\x43\x02\x10\x00")
    agent = BrokenAgent(lambda req: answer(req, good)[:-cut])
    try:
        with pytest.raises(SnmpError) as err:
            run_session(agent.port, lambda s: s.get(["1.3.6.1.2.1.1.3.0"], "sysUpTime"))
        assert err.value.kind == "protocol"
        assert "could not decode" in err.value.message and "sysUpTime" in err.value.message
    finally:
        agent.close()


def test_well_formed_answer_decodes():
    good = vb("1.3.6.1.2.1.1.3.0", b"\x43\x02\x10\x00")
    agent = BrokenAgent(lambda req: answer(req, good))
    try:
        got = run_session(agent.port, lambda s: s.get(["1.3.6.1.2.1.1.3.0"], "sysUpTime"))
        assert got == {"1.3.6.1.2.1.1.3.0": 0x1000}
    finally:
        agent.close()


def test_silence_and_junk_are_a_timeout_of_that_device_only():
    junk = BrokenAgent(lambda req: b"\x30\x03\x02\x01")  # not a message: dropped
    good = BrokenAgent(lambda req: answer(req, vb("1.3.6.1.2.1.1.3.0", b"\x43\x01\x05")))

    async def both(pool: SocketPool):
        creds = SnmpCredentials.v2c("quillmoor-ro")
        bad = FastSession(pool, creds, "127.0.0.1", junk.port, timeout=0.3, retries=1)
        fine = FastSession(pool, creds, "127.0.0.1", good.port, timeout=2.0, retries=0)
        return await asyncio.gather(bad.get(["1.3.6.1.2.1.1.3.0"], "sysUpTime"),
                                    fine.get(["1.3.6.1.2.1.1.3.0"], "sysUpTime"),
                                    return_exceptions=True)  # fmt: skip

    async def main():
        pool = SocketPool()
        try:
            result = await both(pool)
            assert pool.sockets() == 1  # both devices shared one client socket
            return result, pool.groups[socket.AF_INET][0].stray
        finally:
            pool.close()

    try:
        (failed, fine), stray = asyncio.run(main())
    finally:
        junk.close()
        good.close()
    assert isinstance(failed, SnmpError) and failed.kind == "timeout"
    assert "2 tries of 0.3 s" in failed.message
    assert fine == {"1.3.6.1.2.1.1.3.0": 5}
    assert stray == 2  # one junk datagram per try


def test_walk_that_goes_backwards_is_refused():
    # An agent answering every GETBULK with the same row would loop a naive walker.
    col = "1.3.6.1.2.1.99.1.1.1.4"
    agent = BrokenAgent(lambda req: answer(req, vb(col + ".200", b"\x02\x01\x05")))
    try:
        with pytest.raises(SnmpError, match="out of order"):
            run_session(agent.port, lambda s: s.walk_columns([col], "sensor values"))
    finally:
        agent.close()


def test_groups_hold_at_most_group_size_devices():
    async def main():
        pool = SocketPool(group_size=3)
        try:
            groups = [await pool.join(socket.AF_INET) for _ in range(7)]
            return len({id(g) for g in groups}), pool.sockets(), groups[0].rcvbuf
        finally:
            pool.close()

    distinct, sockets, rcvbuf = asyncio.run(main())
    assert (distinct, sockets) == (3, 3)
    assert rcvbuf >= 212_992 // 2  # at least the Linux default, at most rmem_max


def test_bench_poll_command_reports_per_varbind_costs(snmpd_small, monkeypatch, capsys):
    monkeypatch.setenv("QM_BENCH_COMMUNITY", snmpd_small.community)
    code = cli_main(["bench", "poll", f"127.0.0.1:{snmpd_small.port}", "--community-env",
                     "QM_BENCH_COMMUNITY", "--cycles", "3", "--json"])  # fmt: skip
    out = capsys.readouterr()
    assert code == 0, out.err
    got = json.loads(out.out)
    assert (got["path"], got["optics"], got["readings"], got["cycles"]) == ("fast v2c", 2, 19, 3)
    # marks (2) + value and status of 19 sensors + admin/oper of 2 ports, at least
    assert got["steady_varbinds"] >= 2 + 2 * 19 + 2 * 2
    assert got["discovery_varbinds"] > got["steady_varbinds"]
    assert got["steady_us_per_varbind"] > 0 and got["optics_per_core_minute"] > 0
    assert snmpd_small.community not in out.out + out.err


def test_bench_poll_of_a_silent_device_is_a_clear_error(monkeypatch, capsys):
    monkeypatch.setenv("QM_BENCH_COMMUNITY", "quillmoor-ro")
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as silent:
        silent.bind(("127.0.0.1", 0))
        port = silent.getsockname()[1]
        code = cli_main(["bench", "poll", f"127.0.0.1:{port}", "--community-env",
                         "QM_BENCH_COMMUNITY", "--timeout", "0.3", "--retries", "0"])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith("lightwarden bench: ") and "no answer from 127.0.0.1" in err
    assert "Traceback" not in err
