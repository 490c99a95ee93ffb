"""The whole product through its real command: `lightwarden demo` scraped over HTTP.

One demo run (module fixture): the lab's SNMP agents and SSH servers, the poller, the rule
layer and the exposition, all in the child process; the test only sees its stdout and its
/metrics. Expectations come from the lab model (fixtures/lab/model.py, lab.yaml stories)
and from outside sources named beside each check.
"""

from __future__ import annotations

import itertools
import subprocess
import time
import urllib.error

import pytest
from support.demo import DemoProc, Scrape
from support.procs import require_binary

from lightwarden.fixtures.lab.model import DAY, Lab

pytestmark = [pytest.mark.slow]

DURATION_S = 30.0
SPEED = 60.0
HOLD_S = 2.0
LAB = Lab.load()


def _optic_count(device: str) -> int:
    return sum(1 for p in LAB.devices[device].ports if p.optic is not None)


def _fully_polled(s: Scrape) -> bool:
    return all(
        s.value("lightwarden_device_optics", device=d) == _optic_count(d) for d in LAB.devices
    )


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """Start the demo, scrape it about once a second until it ends by itself."""
    demo = DemoProc(
        tmp_path_factory.mktemp("demo"), duration=DURATION_S, speed=SPEED, interval=2.0,
        hold=HOLD_S,
    )
    scrapes: list[Scrape] = []
    try:
        deadline = demo.started + DURATION_S + 60.0
        while demo.alive() and time.time() < deadline:
            try:
                scrapes.append(demo.scrape())
            except (OSError, urllib.error.URLError):
                # At the end of its duration the demo closes its HTTP server first and
                # then stops the poller and the lab: refused scrapes while it exits are
                # expected; refused scrapes from a demo that keeps running are not.
                try:
                    demo.proc.popen.wait(20.0)
                except subprocess.TimeoutExpired:
                    raise AssertionError(
                        f"/metrics stopped answering but the demo kept running:\n"
                        f"{demo.log_tail()}"
                    ) from None
                break
            time.sleep(1.0)
        rc = demo.wait_exit(max(5.0, deadline - time.time()))
        yield demo, scrapes, rc
    finally:
        demo.stop()


def _settled(run) -> Scrape:
    """The last scrape taken after every device's first full poll had landed."""
    demo, scrapes, _ = run
    full = [s for s in scrapes if _fully_polled(s)]
    assert full, f"no scrape had every device fully polled ({len(scrapes)} scrapes):\n" + \
        demo.log_tail()
    # Conditions are held for HOLD_S (changes need two polls 2 s apart); the demo keeps
    # polling for most of its duration after the first full poll, so the last scrape
    # shows the held conditions.
    return full[-1]


def test_exits_zero_at_end_of_duration(run):
    demo, scrapes, rc = run
    assert rc == 0, demo.log_tail()
    assert "Traceback" not in demo.log_tail(100_000)
    assert scrapes, "the demo never answered a scrape"


def test_every_lab_optic_is_exported(run):
    s = _settled(run)
    # source: the lab model itself (fixtures/lab/model.py): 168 optics across 4 switches
    # (158, plus the ten ends of the consistency stories' BiDi, CWDM and multimode runs).
    expected = {(p.device, p.name) for p in LAB.optic_ports()}
    assert len(expected) == 168
    info = {(x.labels["device"], x.labels["port"]) for x in s.samples("lightwarden_optic_info")}
    cond = {
        (x.labels["device"], x.labels["port"]) for x in s.samples("lightwarden_optic_condition")
    }
    assert info == expected
    assert cond == expected
    # Every lane of every optic yields an Rx power value or says why there is none.
    for port in LAB.optic_ports():
        for lane in range(1, port.optic.part.lanes + 1):
            labels = dict(device=port.device, port=port.name, lane=str(lane))
            got = s.samples("lightwarden_rx_power_dbm", **labels) + s.samples(
                "lightwarden_reading_unavailable", quantity="rx_power", **labels
            )
            assert len(got) == 1, (labels, got)
    # info carries the part the lab fitted
    for x in s.samples("lightwarden_optic_info"):
        port = LAB.devices[x.labels["device"]].port(x.labels["port"])
        assert x.labels["part_number"] == port.optic.part.part_number
        assert x.labels["pmd"] == port.optic.part.pmd


def test_readings_are_plausible(run):
    s = _settled(run)
    dark_tx = {
        (x.labels["device"], x.labels["port"], x.labels["lane"])
        for x in s.samples("lightwarden_reading_unavailable", quantity="tx_power")
    }
    checked = 0
    # Ranges are sanity bounds for pluggable optics, not pass/fail limits: SFF-8472 power
    # fields span 0..6.5535 mW (-40..+8.2 dBm) (source: standards.md SFF-8472 A2h scaling),
    # commercial case 0-70 C, Vcc 3.3 V +-5 % (standards.md "Rules of thumb", practice).
    for x in s.samples("lightwarden_rx_power_dbm"):
        assert -40.0 <= x.value <= 10.0, x
        checked += 1
    for x in s.samples("lightwarden_tx_power_dbm"):
        assert -40.0 <= x.value <= 10.0, x
    for x in s.samples("lightwarden_bias_amperes"):
        key = (x.labels["device"], x.labels["port"], x.labels["lane"])
        if key in dark_tx:
            assert x.value == 0.0, x  # transmitter disabled: no bias current
        else:
            # lit lanes: a few mA to ~100 mA, exported in amperes (base unit)
            assert 0.001 < x.value < 0.2, x
    for x in s.samples("lightwarden_temperature_celsius"):
        assert 0.0 <= x.value <= 80.0, x
    for x in s.samples("lightwarden_supply_volts"):
        assert 3.1 <= x.value <= 3.5, x
    assert checked >= 150
    assert len(s.samples("lightwarden_temperature_celsius")) == 168  # one per optic
    assert len(s.samples("lightwarden_supply_volts")) == 168


@pytest.mark.parametrize("device", ["qm-core-a", "qm-core-b"])
def test_hot_receiver_is_overloaded(run, device):
    """hot_receiver story: a 10GBASE-ER pair on a 2 km run with no pad."""
    s = _settled(run)
    rx = s.value("lightwarden_rx_power_dbm", device=device, port="sfp31", lane="1")
    assert rx is not None
    # source: standards.md IEEE 802.3 cl.52 table, 10GBASE-ER Rx max (overload) -1.0 dBm
    # (from memory)
    assert rx > -1.0
    assert s.condition(device, "sfp31") == "overloaded"
    assert s.value("lightwarden_rx_margin_to_overload_db", device=device, port="sfp31",
                   lane="1") <= 0.0
    edge = s.samples("lightwarden_rx_overload_dbm", device=device, port="sfp31", lane="1")
    assert len(edge) == 1
    if edge[0].labels["window_source"] == "pmd-table":
        assert edge[0].value == -1.0  # source: as above (standards.md, 10GBASE-ER)


def test_dark_port_and_its_disabled_far_end(run):
    s = _settled(run)
    # dark_port story at qm-dist-b sfp20: the far transmitter (qm-core-a sfp20) is off.
    assert s.condition("qm-dist-b", "sfp20") == "dark"
    # the dark receiver is explained by the laser that is off at the far end
    (dark,) = s.samples("lightwarden_reading_condition", device="qm-dist-b", port="sfp20",
                        quantity="rx_power")
    assert dark.labels["condition"] == "dark"
    assert dark.labels["cause"] == "qm-core-a|sfp20|1|tx_power"
    assert s.samples("lightwarden_rx_power_dbm", device="qm-dist-b", port="sfp20") == []
    # this end's laser is off (no Tx light, bias 0 mA): laser_off, not "dark"
    assert s.condition("qm-core-a", "sfp20") == "laser_off"
    assert s.samples("lightwarden_reading_unavailable", device="qm-core-a", port="sfp20",
                     quantity="tx_power", reason="no_light")
    # its receiver still gets light from qm-dist-b
    rx = s.value("lightwarden_rx_power_dbm", device="qm-core-a", port="sfp20", lane="1")
    assert rx is not None and rx > -19.0  # source: standards.md 1000BASE-LX Rx min -19 (memory)


def test_missing_bias_sensor_is_unknown(run):
    s = _settled(run)
    assert s.condition("qm-core-a", "sfp2") == "unknown"
    got = s.samples("lightwarden_reading_unavailable", device="qm-core-a", port="sfp2",
                    quantity="bias")
    assert [x.labels["reason"] for x in got] == ["unavailable"]
    assert s.samples("lightwarden_bias_amperes", device="qm-core-a", port="sfp2") == []
    # the other readings of that optic are still there
    assert s.value("lightwarden_rx_power_dbm", device="qm-core-a", port="sfp2", lane="1")


def test_hover_never_flaps_faster_than_the_hold(run):
    """hover story: Rx swings around the 3 dB margin target above the standard's sensitivity."""
    _, scrapes, _ = run
    seen: list[tuple[float, str]] = []  # (poll time of qm-core-b, condition)
    for s in scrapes:
        cond = s.condition("qm-core-b", "sfp12")
        polled = s.value("lightwarden_device_last_success_timestamp_seconds",
                         device="qm-core-b")
        if cond is None or polled is None:
            continue
        if not seen or seen[-1][0] != polled:
            seen.append((polled, cond))
    assert len(seen) >= 5, f"too few polls of qm-core-b seen: {seen}"
    assert {c for _, c in seen} <= {"healthy", "near_sensitivity"}, seen
    changes = [b[0] for a, b in itertools.pairwise(seen) if a[1] != b[1]]
    # A held condition changes at most once per hold time (rules/README.md "Held
    # conditions"); 0.5 s leeway for poll-time jitter between the two clocks.
    for a, b in itertools.pairwise(changes):
        assert b - a >= HOLD_S - 0.5, (changes, seen)


def test_laser_wear_shows_in_tx_power(run):
    s = _settled(run)
    optic = LAB.devices["qm-dist-a"].port("sfp5").optic
    tx = s.value("lightwarden_tx_power_dbm", device="qm-dist-a", port="sfp5", lane="1")
    assert tx is not None
    # laser_wear story: 0.06 dB/day since 30 days before the lab epoch (lab.yaml) -> 1.8 dB
    # below the part's nominal launch, less the optic's own offset (within +-0.6 dB).
    worn_days = (LAB.epoch - optic.wear_start_s) / DAY
    assert worn_days == pytest.approx(30.0)
    assert tx < optic.part.tx_dbm - 1.0
    # Wear-out shows as output falling 1-2 dB (source: standards.md "Rules of thumb",
    # practice): the drop here is in that band once the fixed per-optic offset is removed.
    drop = optic.part.tx_dbm + optic.tx_offset_db[0] - tx
    assert 1.0 < drop < 2.5


def test_promtool_accepts_the_exposition(run, tmp_path):
    promtool = require_binary("promtool")
    s = _settled(run)
    # source: /work/shared/notes/prometheus.md (promtool check metrics lints the text
    # format; exit 3 on findings)
    res = subprocess.run([promtool, "check", "metrics"], input=s.text, capture_output=True,
                         text=True, timeout=60, check=False)
    assert res.returncode == 0, res.stdout + res.stderr
    assert res.stdout.strip() == "" and res.stderr.strip() == "", res.stdout + res.stderr
