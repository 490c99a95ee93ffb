"""SSH collection against the lab over real SSH: netmiko (client) -> asyncssh (lab) on loopback.

The lab's clock is frozen (speed 0), so the SSH answers and the lab model are compared at
the same instant. Fault tests use short read timeouts and run beside a healthy poll to show
one device's trouble never stops another's.
"""

from __future__ import annotations

import asyncio
import base64
import logging
import math
import shutil
import socket
from pathlib import Path

import asyncssh
import pytest

from lightwarden.collector.readings import PollOutcome, Quantity, ReadingStatus
from lightwarden.collector.source import PollSource
from lightwarden.collector.ssh.platforms.platform import PlatformError, load_platform
from lightwarden.collector.ssh.source import SshCredentials, SshSource, SshWorkers
from lightwarden.fixtures.lab.model import LAB_SSH_PASSWORD, LAB_SSH_USER, LabClock
from lightwarden.fixtures.lab.ssh_cli import LabSshServer, simulated_listeners

FAULT_READ_TIMEOUT = 2.0
FAULT_LISTENERS = {
    "qm-f-auth": "qm-core-a",
    "qm-f-hostkey": "qm-core-b",
    "qm-f-hang": "qm-dist-a",
    "qm-f-drop": "qm-dist-b",
    "qm-f-slow": "qm-core-a",
    "qm-f-malformed": "qm-core-b",
    "qm-f-odd": "qm-core-a",
    "qm-f-noprompt": "qm-dist-a",
    "qm-f-reconnect": "qm-dist-b",
    "qm-f-busy": "qm-core-b",
    "qm-f-key": "qm-core-a",
}


@pytest.fixture(scope="module")
def clock(lab) -> LabClock:
    # Frozen two hours into the lab's stories (the dirty connector has stepped twice).
    return LabClock(lab.epoch + 2.5 * 3600, speed=0)


@pytest.fixture(scope="module")
def client_key() -> asyncssh.SSHKey:
    return asyncssh.generate_private_key("ssh-ed25519")


@pytest.fixture(scope="module")
def server(lab, clock, client_key):
    listeners = {d: d for d in lab.devices} | FAULT_LISTENERS
    with LabSshServer(
        lab, clock, listeners=listeners,
        client_keys=[client_key.export_public_key("openssh").decode()],
    ) as srv:
        yield srv


@pytest.fixture(scope="module")
def workers():
    with SshWorkers(max_workers=8) as w:
        yield w


@pytest.fixture(scope="module")
def qmos():
    return load_platform("qmos")


CREDS = SshCredentials(LAB_SSH_USER, LAB_SSH_PASSWORD)


def make_source(server, workers, qmos, name, **kw) -> SshSource:
    kw.setdefault("known_hosts", server.known_hosts)
    kw.setdefault("read_timeout", FAULT_READ_TIMEOUT)
    kw.setdefault("connect_timeout", 3.0)
    return SshSource(name, server.host, qmos, kw.pop("credentials", CREDS), workers,
                     port=server.port(name), **kw)


async def poll(source: SshSource, now: float = 1_000.0) -> PollOutcome:
    # A guard so a broken fault path fails the test instead of hanging it (not a speed check).
    return await asyncio.wait_for(source.poll(now), timeout=30)


async def poll_beside_healthy(fault: SshSource, healthy: SshSource) -> PollOutcome:
    bad, good = await asyncio.gather(poll(fault), poll(healthy))
    assert good.ok, good.error
    assert len(good.batch) > 0
    return bad


def run(coro):
    return asyncio.run(coro)


# -- readings agree with the lab model ----------------------------------------------------


def _power_tolerance_db(mw: float, watts_display: bool) -> float:
    if not watts_display:
        return 0.005 + 1e-9  # shown as dBm with 2 decimals
    half = 0.00005  # shown as mW with 4 decimals
    return 10 * math.log10(mw / (mw - half)) + 1e-9


def test_source_matches_the_poll_source_protocol(server, workers, qmos):
    src = make_source(server, workers, qmos, "qm-core-a")
    assert isinstance(src, PollSource)
    assert src.strict_host_key  # strict host-key checking is the default
    assert "qm-lab-ssh" not in repr(src) and "qm-lab-ssh" not in repr(CREDS)


def test_ssh_readings_match_the_lab_model(server, workers, qmos, lab, clock):
    sources = [make_source(server, workers, qmos, d, read_timeout=10) for d in lab.devices]

    async def go():
        outs = await asyncio.gather(*(poll(s, now=clock.now()) for s in sources))
        for s in sources:
            await s.aclose()
        return outs

    outcomes = run(go())
    t = clock.now()
    label = {Quantity.RX_POWER: "rx", Quantity.TX_POWER: "tx", Quantity.BIAS: "bias"}
    for outcome in outcomes:
        assert outcome.ok, outcome.error
        device = lab.devices[outcome.device]
        watts = device.power_encoding == "watts"
        batch = outcome.batch
        assert batch.taken_at == t
        samples = {s.port.name: s for s in lab.sample(outcome.device, t) if s.optic is not None}
        assert {o.port for o in batch.optics} == set(samples)
        seen = 0
        for optic, lane, q, value, status, note in batch.rows():
            sample = samples[optic.port]
            part = sample.optic.part
            if q in (Quantity.TEMPERATURE, Quantity.SUPPLY):
                assert lane == 0
                truth = sample.temperature_c if q is Quantity.TEMPERATURE else sample.supply_v
                tol = 0.05 + 1e-9 if q is Quantity.TEMPERATURE else 0.0005 + 1e-9
            else:
                ls = sample.lanes[lane - 1]
                truth = {"rx": ls.rx_mw, "tx": ls.tx_mw, "bias": ls.bias_ma}[label[q]]
                if q is Quantity.BIAS:
                    tol = (0.00005 if watts else 0.005) + 1e-9
                elif truth:
                    tol = _power_tolerance_db(truth, watts)
                    truth = 10 * math.log10(truth)
            if truth is None:
                # a sensor that is not reporting: the lab CLI shows "no-data", which the
                # QMOS definition lists as `unavailable` (same status as the SNMP path)
                assert status is ReadingStatus.UNAVAILABLE, (optic.port, lane, q)
                assert "no-data" in note
            elif truth == 0.0 and q in (Quantity.RX_POWER, Quantity.TX_POWER):
                assert status is ReadingStatus.NO_LIGHT, (optic.port, lane, q)
            else:
                assert status is ReadingStatus.OK, (optic.port, lane, q, note)
                assert value == pytest.approx(truth, abs=tol), (optic.port, lane, q)
            seen += 1
        # every lane quantity of every lane, plus temperature and supply per module
        assert seen == sum(3 * len(s.lanes) + 2 for s in samples.values())
        for optic in batch.optics:
            part = samples[optic.port].optic.part
            assert (optic.pmd, optic.form_factor, optic.part_number) == (
                part.pmd, part.form_factor, part.part_number)
            assert optic.serial == samples[optic.port].optic.serial
            assert optic.lanes == part.lanes
            for key, q in (("rx_power", Quantity.RX_POWER), ("bias", Quantity.BIAS),
                           ("temperature", Quantity.TEMPERATURE)):
                ha, la, hw, lw = part.thresholds[key]
                got = optic.thresholds[q]
                for mine, truth in ((got.high_alarm, ha), (got.low_alarm, la),
                                    (got.high_warning, hw), (got.low_warning, lw)):
                    tol = (_power_tolerance_db(10 ** (truth / 10), watts)
                           if q is Quantity.RX_POWER else 0.05 + 1e-9)
                    assert mine == pytest.approx(truth, abs=tol), (optic.port, key)


def test_stories_come_through_ssh(server, workers, qmos, lab, clock):
    # The lab's dark port and unavailable bias sensor (lab.yaml stories) over SSH.
    async def go():
        a = make_source(server, workers, qmos, "qm-core-a", read_timeout=10)
        b = make_source(server, workers, qmos, "qm-dist-b", read_timeout=10)
        outs = await asyncio.gather(poll(a), poll(b))
        await a.aclose()
        await b.aclose()
        return outs

    core_a, dist_b = run(go())
    rows_a = {(o.port, lane, q): (s, n) for o, lane, q, _v, s, n in core_a.batch.rows()}
    rows_b = {(o.port, lane, q): (s, n) for o, lane, q, _v, s, n in dist_b.batch.rows()}
    assert rows_a[("sfp2", 1, Quantity.BIAS)][0] is ReadingStatus.UNAVAILABLE
    # qm-dist-b sfp20's far transmitter is disabled: no light, shown as "-inf" in dBm
    assert rows_b[("sfp20", 1, Quantity.RX_POWER)] == (ReadingStatus.NO_LIGHT,
                                                         "no light (device shows '-inf')")
    # ... and qm-core-a sfp20's own Tx is off, shown as "--" in mW
    assert rows_a[("sfp20", 1, Quantity.TX_POWER)][0] is ReadingStatus.NO_LIGHT


# -- faults ------------------------------------------------------------------------------


def test_wrong_password_is_an_auth_outcome_without_secrets(server, workers, qmos, caplog):
    server.faults("qm-f-auth").wrong_password = True
    caplog.set_level(logging.DEBUG)
    try:
        async def go():
            return await poll_beside_healthy(
                make_source(server, workers, qmos, "qm-f-auth"),
                make_source(server, workers, qmos, "qm-core-b"),
            )

        out = run(go())
    finally:
        server.faults("qm-f-auth").wrong_password = False
    assert out.error_kind == "auth" and out.batch is None
    assert out.error.startswith("qm-f-auth: authentication failed for user 'lwops'")
    assert LAB_SSH_PASSWORD not in out.error
    assert "Traceback" not in out.error
    assert all(LAB_SSH_PASSWORD not in r.getMessage() for r in caplog.records)


def test_changed_host_key_is_refused_as_mismatch(server, workers, qmos):
    server.change_host_key("qm-f-hostkey")
    try:
        async def go():
            return await poll_beside_healthy(
                make_source(server, workers, qmos, "qm-f-hostkey"),
                make_source(server, workers, qmos, "qm-dist-a"),
            )

        out = run(go())
    finally:
        server.restore_host_key("qm-f-hostkey")
    assert out.error_kind == "hostkey"
    assert out.error.startswith("qm-f-hostkey: host key mismatch")
    assert str(server.known_hosts) in out.error
    # with the original key back, the same source settings work
    ok = run(poll(make_source(server, workers, qmos, "qm-f-hostkey")))
    assert ok.ok, ok.error


def test_unknown_host_key_is_refused(server, workers, qmos, tmp_path):
    other = tmp_path / "known_hosts"
    other.write_text(server.host_key_line("qm-core-a") + "\n")
    out = run(poll(make_source(server, workers, qmos, "qm-core-b", known_hosts=other)))
    assert out.error_kind == "hostkey" and "host key unknown" in out.error
    missing = run(poll(make_source(server, workers, qmos, "qm-core-b",
                                   known_hosts=tmp_path / "nope")))
    assert missing.error_kind == "config" and "not found" in missing.error


def test_hung_command_times_out(server, workers, qmos):
    server.faults("qm-f-hang").hang = True
    try:
        async def go():
            return await poll_beside_healthy(
                make_source(server, workers, qmos, "qm-f-hang"),
                make_source(server, workers, qmos, "qm-core-a"),
            )

        out = run(go())
    finally:
        server.faults("qm-f-hang").hang = False
    assert out.error_kind == "timeout"
    assert out.error == "qm-f-hang: 'optics levels' timed out: no prompt after 2 s"


def test_session_dropped_mid_output_then_recovers(server, workers, qmos):
    faults = server.faults("qm-f-drop")
    faults.drop_after_lines = 10
    src = make_source(server, workers, qmos, "qm-f-drop")
    try:
        async def go():
            return await poll_beside_healthy(src, make_source(server, workers, qmos, "qm-core-b"))

        out = run(go())
    finally:
        faults.drop_after_lines = None
    assert out.error_kind == "dropped"
    port = server.port("qm-f-drop")
    assert out.error == (
        f"qm-f-drop: session to 127.0.0.1:{port} dropped during 'optics levels'"
    )
    again = run(poll(src))
    assert again.ok, again.error


def test_dropped_idle_session_is_reopened_once(server, workers, qmos):
    src = make_source(server, workers, qmos, "qm-f-reconnect")

    async def go():
        first = await poll(src)
        before = server.accepted("qm-f-reconnect")
        assert server.drop_sessions("qm-f-reconnect") == 1
        second = await poll(src)
        third = await poll(src)
        await src.aclose()
        return first, before, second, third

    first, before, second, third = run(go())
    assert first.ok and second.ok and third.ok, (second.error, third.error)
    # one new connection for the second poll; the third reuses it
    assert server.accepted("qm-f-reconnect") == before + 1


def test_slow_output_is_read_to_the_prompt(server, workers, qmos):
    server.faults("qm-f-slow").slow_line_s = 0.004
    try:
        src = make_source(server, workers, qmos, "qm-f-slow", read_timeout=10)
        ref = make_source(server, workers, qmos, "qm-core-a", read_timeout=10)

        async def go():
            return await asyncio.gather(poll(src), poll(ref))

        slow, normal = run(go())
    finally:
        server.faults("qm-f-slow").slow_line_s = 0.0
    assert slow.ok, slow.error
    assert len(slow.batch) == len(normal.batch)


def test_malformed_row_gives_parse_outcome_with_partial_batch(server, workers, qmos):
    server.faults("qm-f-malformed").malformed_row = "sfp3"
    try:
        async def go():
            return await poll_beside_healthy(
                make_source(server, workers, qmos, "qm-f-malformed"),
                make_source(server, workers, qmos, "qm-dist-b"),
            )

        out = run(go())
    finally:
        server.faults("qm-f-malformed").malformed_row = None
    assert out.error_kind == "parse"
    assert out.error.startswith("qm-f-malformed: output not fully understood: "
                                "'optics levels' line ")
    assert "sfp3" in out.error
    rows = {(o.port, lane, q): (s, n) for o, lane, q, _v, s, n in out.batch.rows()}
    assert rows[("sfp3", 1, Quantity.RX_POWER)][0] is ReadingStatus.INVALID
    assert "line not understood" in rows[("sfp3", 1, Quantity.RX_POWER)][1]
    assert rows[("sfp4", 1, Quantity.RX_POWER)][0] is ReadingStatus.OK
    assert len({o.port for o in out.batch.optics}) > 30


def test_odd_cells_become_statuses_with_reasons(server, workers, qmos):
    server.faults("qm-f-odd").odd_cells = {
        "sfp1": {"rx": "--", "tx": "N/A", "volts": ""},
        "sfp4": {"bias": "n/s"},
        "sfp6": {"bias": "No-Data"},
        "sfp5": {"rx": "0.0000"},
    }
    try:
        out = run(poll(make_source(server, workers, qmos, "qm-f-odd")))
    finally:
        server.faults("qm-f-odd").odd_cells = {}
    assert out.ok, out.error
    rows = {(o.port, lane, q): (s, n) for o, lane, q, _v, s, n in out.batch.rows()}
    assert rows[("sfp1", 1, Quantity.RX_POWER)][0] is ReadingStatus.NO_LIGHT
    assert rows[("sfp1", 1, Quantity.TX_POWER)] == (
        ReadingStatus.UNSUPPORTED, "tx_power: not supported (device shows 'N/A')")
    assert rows[("sfp1", 0, Quantity.SUPPLY)][0] is ReadingStatus.UNSUPPORTED
    assert rows[("sfp1", 0, Quantity.TEMPERATURE)][0] is ReadingStatus.OK
    assert rows[("sfp4", 1, Quantity.BIAS)][0] is ReadingStatus.UNSUPPORTED
    assert rows[("sfp6", 1, Quantity.BIAS)] == (
        ReadingStatus.UNAVAILABLE, "bias: sensor not reporting (device shows 'No-Data')")
    assert rows[("sfp5", 1, Quantity.RX_POWER)] == (ReadingStatus.NO_LIGHT, "no light (0 mW)")


def test_missing_prompt_times_out_naming_the_pattern(server, workers, qmos):
    server.faults("qm-f-noprompt").missing_prompt = True
    try:
        async def go():
            return await poll_beside_healthy(
                make_source(server, workers, qmos, "qm-f-noprompt"),
                make_source(server, workers, qmos, "qm-core-b"),
            )

        out = run(go())
    finally:
        server.faults("qm-f-noprompt").missing_prompt = False
    assert out.error_kind == "timeout"
    assert out.error.startswith("qm-f-noprompt: no prompt matching")
    assert qmos.prompt in out.error


def test_connection_refused(workers, qmos, server):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        free = s.getsockname()[1]
    src = SshSource("qm-gone", "127.0.0.1", qmos, CREDS, workers, port=free,
                    known_hosts=server.known_hosts, connect_timeout=3)
    out = run(poll(src))
    assert out.error_kind == "refused"
    assert out.error == f"qm-gone: connection refused by 127.0.0.1:{free}"


def test_key_login(server, workers, qmos, client_key, tmp_path):
    key_file = tmp_path / "id_ed25519"
    key_file.write_bytes(client_key.export_private_key("openssh"))
    key_file.chmod(0o600)
    creds = SshCredentials(LAB_SSH_USER, key_file=str(key_file))
    out = run(poll(make_source(server, workers, qmos, "qm-f-key", credentials=creds)))
    assert out.ok, out.error
    unreadable = SshCredentials(LAB_SSH_USER, key_file=str(tmp_path / "missing"))
    bad = run(poll(make_source(server, workers, qmos, "qm-f-key", credentials=unreadable)))
    assert bad.error_kind == "config" and "cannot be read" in bad.error


def test_per_device_sessions_are_bounded(server, workers, qmos):
    src = make_source(server, workers, qmos, "qm-f-busy", read_timeout=10)

    async def go():
        before = server.accepted("qm-f-busy")
        outs = await asyncio.gather(*(poll(src) for _ in range(3)))
        await src.aclose()
        return before, outs

    before, outs = run(go())
    assert all(o.ok for o in outs), [o.error for o in outs]
    # max_sessions=1: the three polls took turns on one session
    assert server.accepted("qm-f-busy") == before + 1


def test_memory_map_over_ssh_decodes_to_the_same_optic(server, workers, qmos, lab, clock):
    from lightwarden.collector.eeprom import decode

    src = make_source(server, workers, qmos, "qm-dist-a", read_timeout=10)

    async def go():
        outs = [await src.read_memory_map(p) for p in ("sfp6", "qsfp1", "sfp99")]
        await src.aclose()
        return outs

    sfp6, qsfp1, missing = run(go())
    samples = {s.port.name: s for s in lab.sample("qm-dist-a", clock.now())}
    for got in (sfp6, qsfp1):
        assert got.error == "" and got.data is not None
        m = decode(got.data)
        optic = samples[got.port].optic
        assert (m.pmd, m.serial, m.part_number) == (optic.part.pmd, optic.serial,
                                                    optic.part.part_number)
    # lab.yaml story: qm-dist-a sfp6 carries a memory map with a corrupt CC_BASE
    assert any("CC_BASE" in p for p in decode(sfp6.data).problems)
    assert missing.error_kind == "parse"
    assert missing.error == (
        "qm-dist-a: 'optics memory sfp99': !! refused: no such port (optics memory sfp99)")


# -- many devices ------------------------------------------------------------------------


def test_fifty_simulated_devices_polled_concurrently(lab, clock):
    listeners = simulated_listeners(lab, 50)
    qmos = load_platform("qmos")
    with LabSshServer(lab, clock, listeners=listeners) as srv, SshWorkers(25) as pool:
        sources = [
            SshSource(name, srv.host, qmos, CREDS, pool, port=srv.port(name),
                      known_hosts=srv.known_hosts, read_timeout=20, connect_timeout=20)
            for name in srv.names
        ]

        async def go():
            outs = await asyncio.gather(*(s.poll(clock.now()) for s in sources))
            await asyncio.gather(*(s.aclose() for s in sources))
            return outs

        outcomes = run(go())
    assert [o.error for o in outcomes if not o.ok] == []
    expected = {d: sum(3 * len(s.lanes) + 2 for s in lab.sample(d, clock.now()) if s.optic)
                for d in lab.devices}
    for o in outcomes:
        assert len(o.batch) == expected[listeners[o.device]], o.device


# -- platform definition errors ----------------------------------------------------------

PLATFORM_DIR = Path(load_platform("qmos").base_dir)


def _definition(tmp_path: Path, text: str) -> Path:
    for template in PLATFORM_DIR.glob("qmos_*.textfsm"):
        shutil.copy(template, tmp_path / template.name)
    path = tmp_path / "mine.yaml"
    path.write_text(text)
    return path


QMOS_TEXT = (PLATFORM_DIR / "qmos.yaml").read_text()


def _line_of(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), 1) if needle in line)


def test_shipped_definition_copied_elsewhere_loads(tmp_path):
    assert load_platform(_definition(tmp_path, QMOS_TEXT)).name == "qmos"


@pytest.mark.parametrize(
    ("old", "new", "key", "needle", "message"),
    [
        ("      lane: LANE\n", "      lane: LANE\n      colour: RED\n",
         "diagnostics[0].columns.colour", "colour: RED", "unknown key"),
        ("rx: {value: RX, unit_value: POWER_UNIT}", "rx: {value: RX, unit: dB}",
         "diagnostics[0].columns.rx.unit", "rx: {value: RX, unit: dB}", "'dBm'"),
        ("rx: {value: RX, unit_value: POWER_UNIT}", "rx: {value: RX, unit: mA}",
         "diagnostics[0].columns", "    columns:\n      port: PORT\n      lane", "does not fit"),
        ("prompt: '[A-Za-z0-9._-]+/qmos: ?$'", "prompt: '[A-Za-z0-9._-]+/qmos: ?'",
         "prompt", "prompt: '[A-Za-z0-9._-]+/qmos: ?'", "anchored"),
        ("template: qmos_limits.textfsm", "template: qmos_edges.textfsm",
         "diagnostics[1].template", "template: qmos_edges.textfsm", "not found"),
        ("      temperature: {value: TEMP, unit: C}",
         "      temperature: {value: TEMPERATURE, unit: C}",
         "diagnostics[0].columns.temperature.value", "value: TEMPERATURE", "no Value named"),
        ("  command: optics memory {port}", "  command: optics memory",
         "eeprom.command", "  command: optics memory", "{port}"),
        ('error_prefixes: ["!!"]', 'error_prefixes: [""]',
         "error_prefixes[0]", 'error_prefixes: [""]', "at least 1 character"),
        ("    unmatched: UNMATCHED\n    columns:\n      port: PORT\n      quantity",
         "    columns:\n      port: PORT\n      quantity",
         "diagnostics[1].unmatched", "- table: thresholds", "required key is missing"),
    ],
)
def test_definition_errors_name_file_line_and_key(tmp_path, old, new, key, needle, message):
    assert old in QMOS_TEXT
    text = QMOS_TEXT.replace(old, new, 1)
    path = _definition(tmp_path, text)
    with pytest.raises(PlatformError) as info:
        load_platform(path)
    err = info.value
    assert err.file == str(path)
    assert err.key == key
    assert err.line == _line_of(text, needle.split("\n")[0])
    assert message in err.message
    assert str(err).startswith(f"{path}:{err.line}: {key}: ")


def test_one_port_view_and_a_refusal_through_a_definition(server, workers, tmp_path):
    # A definition asking for one port's levels, and for a view QMOS does not have.
    text = (QMOS_TEXT.replace("command: optics levels\n", "command: optics levels qsfp1\n", 1)
            .replace("command: optics limits\n", "command: optics edges\n", 1))
    platform = load_platform(_definition(tmp_path, text))
    out = run(poll(make_source(server, workers, platform, "qm-core-a", read_timeout=10)))
    refusal = "!! refused: not a command; 'help' lists them (optics edges)"
    assert out.error_kind == "parse"
    assert out.error == ("qm-core-a: output not fully understood: 'optics edges' refused by "
                         f"the device (line 1): {refusal!r}")
    assert {o.port for o in out.batch.optics} == {"qsfp1"}
    # qsfp1 is a 4-lane TK-100GLR4-10 (lab.yaml)
    assert {lane for _o, lane, q, *_ in out.batch.rows() if q is Quantity.RX_POWER} == {
        1, 2, 3, 4}


def test_yaml_syntax_and_duplicate_keys(tmp_path):
    broken = QMOS_TEXT.replace("name: qmos", "name: [qmos", 1)
    with pytest.raises(PlatformError) as info:
        load_platform(_definition(tmp_path, broken))
    assert "YAML syntax" in str(info.value) and info.value.line is not None
    twice = QMOS_TEXT.replace("name: qmos\n", "name: qmos\nname: other\n", 1)
    with pytest.raises(PlatformError) as info:
        load_platform(_definition(tmp_path, twice))
    assert info.value.key == "name" and info.value.line == _line_of(twice, "name: other")
    assert "twice" in info.value.message


def test_passphrase_protected_key_login(server, workers, qmos, client_key, tmp_path):
    """An OpenSSH private key encrypted with a passphrase (bcrypt KDF, aes256-ctr: the
    OpenSSH key format, PROTOCOL.key) logs in; a wrong passphrase is a clear config error."""
    key_file = tmp_path / "id_ed25519_enc"
    # the fictional lab's passphrase; aes256-ctr with bcrypt, as ssh-keygen writes it
    key_file.write_bytes(client_key.export_private_key(
        "openssh", passphrase="quillmoor-kf", cipher_name="aes256-ctr"))
    key_file.chmod(0o600)
    body = base64.b64decode(b"".join(key_file.read_bytes().splitlines()[1:-1]))
    assert body.startswith(b"openssh-key-v1\0") and b"aes256-ctr" in body and b"bcrypt" in body
    creds = SshCredentials(LAB_SSH_USER, key_file=str(key_file), key_passphrase="quillmoor-kf")
    out = run(poll(make_source(server, workers, qmos, "qm-f-key", credentials=creds)))
    assert out.ok, out.error
    wrong = SshCredentials(LAB_SSH_USER, key_file=str(key_file), key_passphrase="not-it")
    bad = run(poll(make_source(server, workers, qmos, "qm-f-key", credentials=wrong)))
    assert bad.error_kind == "config" and "passphrase" in bad.error, bad.error
    assert "not-it" not in bad.error
    none = SshCredentials(LAB_SSH_USER, key_file=str(key_file))
    bad = run(poll(make_source(server, workers, qmos, "qm-f-key", credentials=none)))
    assert bad.error_kind == "config" and "passphrase" in bad.error, bad.error
