"""Reading history, the planners' report and the history facts alerts carry.

Synthetic polls on a virtual clock go through the real Monitor (rules, history in
SQLite, lifecycle); the expected dates and rates are worked out by hand below.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import yaml

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, PollOutcome, Quantity
from lightwarden.exporters.app.cli import main
from lightwarden.exporters.app.config import parse_config
from lightwarden.exporters.app.monitor import Monitor
from lightwarden.exporters.app.wiring import build_monitor
from lightwarden.exporters.pages.report import build_report, render_report
from lightwarden.exporters.store.history import History
from lightwarden.rules.findings import Condition

DAY = 86400.0
T0 = 1_780_000_000.0
# 10GBASE-LR: overload +0.5 dBm, sensitivity (min average Rx) -14.4 dBm.
# source: IEEE 802.3 cl.52 (standards.md, verified)
LR_SENSITIVITY = -14.4


def _config(tmp: Path) -> Path:
    data = {
        "site": "t",
        "credentials": {"c": {"snmp_v2c": {"community": {"env": "UNUSED_IN_THIS_TEST"}}}},
        "devices": [{"name": "sw-a", "host": "127.0.0.1", "port": 9, "credentials": "c"},
                    {"name": "sw-b", "host": "127.0.0.1", "port": 9, "credentials": "c"}],
        "plant": [{"a": "sw-a sfp1", "b": "sw-b sfp1", "km": 10.0, "fibre": "OS2",
                   "connectors": 2, "splices": 2}],
        "conditions": {"hold_s": 0, "clear_hold_s": 0},
        "alerting": {"resolve_hold_s": 0},
        "history": {"path": str(tmp / "history.sqlite"), "sample_every_s": 3600},
    }
    path = tmp / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return path


def _poll(device: str, t: float, rx: float, tx: float, bias: float) -> PollOutcome:
    b = BatchBuilder(device)
    o = b.add_optic(OpticIdentity(device=device, port="sfp1", pmd="10GBASE-LR", admin_up=True))
    b.add(o, 1, Quantity.RX_POWER, rx)
    b.add(o, 1, Quantity.TX_POWER, tx)
    b.add(o, 1, Quantity.BIAS, bias)
    return PollOutcome(device, t, 0.1, b.build(t))


def _run(monitor: Monitor, days: int, rx_rate: float, tx_rate: float) -> list:
    """Daily polls of both ends: sw-a transmits (its Tx changes by tx_rate a day) and
    receives a constant -4 dBm; sw-b's Rx changes by rx_rate a day from -5 dBm."""
    events = []
    monitor.alert_sink = events.extend
    for d in range(days):
        t = T0 + d * DAY
        monitor.handle(_poll("sw-a", t, -4.0, -2.0 + tx_rate * d, 30.0 + 0.3 * d))
        monitor.handle(_poll("sw-b", t + 60, -5.0 + rx_rate * d, -2.0, 30.0))
    return events


@pytest.fixture()
def monitor(tmp_path: Path):
    cfg = parse_config(_config(tmp_path).read_text(), "site.yaml")
    m = build_monitor(cfg, base_dir=tmp_path)
    m.open_history()
    yield m
    m.close()


def test_history_keeps_one_sample_per_interval(tmp_path: Path):
    h = History(tmp_path / "h.sqlite", every_s=3600)
    assert h.record(_poll("sw-a", T0, -4, -2, 30).batch) == 3
    assert h.record(_poll("sw-a", T0 + 600, -4, -2, 30).batch) == 0  # too soon
    assert h.record(_poll("sw-a", T0 + 3600, -4.5, -2, 30).batch) == 3
    s = h.series("sw-a", "sfp1", 1, Quantity.RX_POWER)
    assert list(s.times) == [T0, T0 + 3600] and list(s.values) == [-4.0, -4.5]
    h.close()


def test_report_forecasts_when_a_falling_receiver_runs_out_of_margin(monitor: Monitor):
    # Rx falls 0.1 dB/day from -5 dBm. Margin target 3 dB (common practice) means trouble
    # at -14.4 + 3 = -11.4 dBm: (−5 − (−11.4)) / 0.1 = 64 days; the edge at 94 days.
    # The far transmitter is steady, so the whole fall is span loss growth.
    _run(monitor, days=20, rx_rate=-0.1, tx_rate=0.0)
    now = T0 + 19 * DAY
    assert monitor.history is not None
    report = build_report(monitor.history, monitor.plant_with_history(), monitor.targets, now)
    lane = next(o for o in report.lanes if o.device == "sw-b")
    assert lane.rate_db_per_day == pytest.approx(-0.1, abs=1e-6)
    assert lane.sensitivity_dbm == pytest.approx(LR_SENSITIVITY)
    assert lane.target_lost_at == pytest.approx(T0 + 64 * DAY + 60, abs=3600)
    assert lane.edge_reached_at == pytest.approx(T0 + 94 * DAY + 60, abs=3600)
    assert report.lanes[0] is lane  # soonest trouble first
    assert lane.laser_worn is False
    # Span sw-a -> sw-b: measured Tx(A) - Rx(B) = -2 - (-5 + ...) = 3.0 dB rising;
    # budget 10 km x 0.4 + 2 x 0.5 + 2 x 0.1 = 5.2 dB (ITU-T G.652 App. I form with
    # planning values, standards.md practice). Growth compares the first and last five
    # paired samples; the last Rx (day 19 + 60 s) is after the far end's last Tx and is
    # not extrapolated, so the medians are days 2 and 16: 14 days x 0.1 dB = 1.4 dB.
    span = next(s for s in report.spans if s.span == "sw-a sfp1 -> sw-b sfp1")
    assert span.engineered_db == pytest.approx(5.2)
    assert span.growth_db == pytest.approx(1.4, abs=1e-6)
    text = render_report(report)
    assert "sw-b" in text and "1970" not in text


def test_report_sees_a_wearing_laser_at_the_far_end(monitor: Monitor):
    # sw-a's Tx falls 0.06 dB/day and its bias climbs: after 30 days 1.8 dB down, past
    # the 1 dB rule of thumb (standards.md "Rules of thumb", practice).
    _run(monitor, days=30, rx_rate=-0.06, tx_rate=-0.06)
    assert monitor.history is not None
    report = build_report(monitor.history, monitor.plant_with_history(), monitor.targets,
                          T0 + 29 * DAY)
    lane = next(o for o in report.lanes if o.device == "sw-b")
    assert lane.laser_worn is True and lane.laser_note.startswith("far end")


def test_alerts_carry_the_rate_from_history(monitor: Monitor):
    events = _run(monitor, days=70, rx_rate=-0.1, tx_rate=0.0)
    opened = [e for e in events if e.kind == "open" and e.device == "sw-b"]
    assert opened, [e.kind for e in events]
    first = opened[0]
    assert first.condition is Condition.NEAR_SENSITIVITY
    assert first.rate_per_day == pytest.approx(-0.1, abs=1e-3)
    assert "span loss" in first.advice.lower()


def test_report_command_prints_json(tmp_path: Path, monitor: Monitor,
                                    capsys: pytest.CaptureFixture[str]):
    _run(monitor, days=10, rx_rate=-0.1, tx_rate=0.0)
    monitor.close()
    assert main(["report", "-c", str(tmp_path / "site.yaml"), "--json", "--days", "100000"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert {o["device"] for o in doc["lanes"]} == {"sw-a", "sw-b"}
    assert doc["spans"] and doc["spans"][0]["verdict"] in {
        "within budget", "excess loss", "below budget", "not enough samples"}


def test_report_without_history_is_a_clear_error(tmp_path: Path,
                                                 capsys: pytest.CaptureFixture[str]):
    cfg = _config(tmp_path)
    assert main(["report", "-c", str(cfg)]) == 2
    assert "no history yet" in capsys.readouterr().err


def test_lab_backfill_shows_the_wearing_laser_and_its_forecast(tmp_path: Path):
    """The demo's backfilled past, through the real report.

    lab.yaml story laser_wear: qm-dist-a sfp5's Tx falls 0.06 dB/day (from 30 days before
    the lab epoch); its far end qm-core-a sfp5 receives it, so that Rx falls at the same
    rate. Margins are measured to the standard's edge where the PMD is known: 10GBASE-LR
    minimum average receive power -14.4 dBm (IEEE 802.3 cl.52, standards.md, verified),
    not the module's looser -18 dBm alarm (lab.yaml LF-10GLR-10); with the 3 dB margin
    target (common practice) the target is lost at -11.4 dBm.
    """
    from lightwarden.exporters.store.history import History
    from lightwarden.fixtures.lab.backfill import backfill, lab_batch
    from lightwarden.fixtures.lab.model import Lab
    from lightwarden.fixtures.lab.server import lab_plant
    from lightwarden.rules.plant import build_plant

    lab = Lab.load()
    wall_now = 1_800_000_000.0
    cfg = parse_config(yaml.safe_dump({
        "plant": lab_plant(lab),
        "devices": [{"name": d, "host": "127.0.0.1", "credentials": "c"} for d in lab.devices],
        "credentials": {"c": {"snmp_v2c": {"community": {"env": "UNUSED"}}}},
        "history": {"path": str(tmp_path / "h.sqlite")},
    }), "lab")
    monitor = build_monitor(cfg, base_dir=tmp_path, alerts=False)
    history = monitor.open_history()
    assert isinstance(history, History)
    backfill(lab, lambda b: history.record(b, force=True), lab.epoch, wall_now, days=40)
    for device in lab.devices:  # one live poll records the windows the rules chose
        monitor.handle(PollOutcome(device, wall_now, 0.1,
                                   lab_batch(lab, device, lab.epoch, wall_now)))
    plant = build_plant(cfg.plant, monitor.catalogue)
    report = build_report(history, plant, monitor.targets, wall_now, days=25)
    lane = next(o for o in report.lanes if (o.device, o.port) == ("qm-core-a", "sfp5"))
    assert lane.window_source == "standard" and lane.sensitivity_dbm == pytest.approx(-14.4)
    assert lane.rate_db_per_day == pytest.approx(-0.06, abs=0.005)
    assert lane.laser_worn is True and lane.laser_note.startswith("far end")
    days_left = (lane.rx_power_dbm - (-11.4)) / 0.06
    assert lane.target_lost_at == pytest.approx(wall_now + days_left * DAY, rel=0, abs=8 * DAY)
    healthy = next(o for o in report.lanes if (o.device, o.port) == ("qm-core-a", "sfp6"))
    assert healthy.target_lost_at is None and healthy.laser_worn is False
    monitor.close()
