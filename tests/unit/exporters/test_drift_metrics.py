"""Drift and run-out gauges: the lab's healthy lanes export none, its wearing laser's
receiver exports its slope and forecast; the text parses as Prometheus exposition.

lab.yaml story laser_wear: qm-dist-a sfp5's Tx falls 0.06 dB/day, received at qm-core-a
sfp5. Parsing: prometheus_client's text parser (a general reference implementation).
"""

from __future__ import annotations

import pytest
from prometheus_client.parser import text_string_to_metric_families
from support.lab_history import WALL_NOW

from lightwarden.exporters.app.monitor import Monitor
from lightwarden.exporters.prometheus.drift_metrics import render_drift
from lightwarden.rules.outlook import LaneOutlook

DAY = 86400.0


def _samples(text: str) -> dict[str, dict[tuple[str, str, str], float]]:
    out: dict[str, dict[tuple[str, str, str], float]] = {}
    for fam in text_string_to_metric_families(text):
        for s in fam.samples:
            key = (s.labels.get("device", ""), s.labels.get("port", ""), s.labels.get("lane", ""))
            out.setdefault(s.name, {})[key] = s.value
    return out


def test_only_the_wearing_lane_carries_drift_and_run_out(lab_monitor: Monitor):
    got = _samples(lab_monitor.exposition.body().decode())
    drift = got["lightwarden_rx_drift_db_per_day"]
    assert list(drift) == [("qm-core-a", "sfp5", "1")]  # no healthy lane has a sample
    assert drift[("qm-core-a", "sfp5", "1")] == pytest.approx(-0.06, abs=0.006)
    low = got["lightwarden_rx_drift_low_db_per_day"][("qm-core-a", "sfp5", "1")]
    high = got["lightwarden_rx_drift_high_db_per_day"][("qm-core-a", "sfp5", "1")]
    assert low <= drift[("qm-core-a", "sfp5", "1")] <= high < 0.0
    to_target = got["lightwarden_rx_time_to_target_seconds"][("qm-core-a", "sfp5", "1")] / DAY
    to_edge = got["lightwarden_rx_time_to_edge_seconds"][("qm-core-a", "sfp5", "1")] / DAY
    # module Rx low alarm -18 dBm (lab.yaml), 3 dB target (common practice): at -0.06
    # dB/day the 3 dB between target and edge take 50 days
    assert to_edge - to_target == pytest.approx(3.0 / 0.06, rel=0.1)
    assert got["lightwarden_rx_drift_updated_timestamp_seconds"][("", "", "")] == WALL_NOW


def _lane(**kw: object) -> LaneOutlook:
    base: dict[str, object] = dict(
        device="qm-a", port="sfp1", lane=1, pmd="10GBASE-LR", rx_power_dbm=-5.0,
        sensitivity_dbm=-14.4, overload_dbm=0.5, window_source="pmd-table",
        rate_db_per_day=None, rate_low=None, rate_high=None, samples=100,
        target_lost_at=None, edge_reached_at=None, laser_worn=False, laser_note="")
    base.update(kw)
    return LaneOutlook(**base)  # type: ignore[arg-type]  # the fields vary in type


def test_render_leaves_out_what_is_not_believed():
    flat = _lane(rate_db_per_day=-0.0001, rate_low=-0.001, rate_high=0.001, moving=False)
    text = render_drift([flat], WALL_NOW).decode()
    assert "lightwarden_rx_drift_db_per_day{" not in text
    past = _lane(rate_db_per_day=-0.2, rate_low=-0.3, rate_high=-0.1, moving=True,
                 target_lost_at=WALL_NOW - 86400.0, edge_reached_at=WALL_NOW + 86400.0)
    got = _samples(render_drift([past], WALL_NOW).decode())
    assert got["lightwarden_rx_time_to_target_seconds"][("qm-a", "sfp1", "1")] == 0.0  # out now
    assert got["lightwarden_rx_time_to_edge_seconds"][("qm-a", "sfp1", "1")] == pytest.approx(DAY)


@pytest.mark.external
def test_the_drift_families_pass_promtool_check_metrics():
    # source: promtool check metrics (Prometheus's own exposition lint)
    import subprocess

    from support.procs import require_binary

    promtool = require_binary("promtool")
    lane = _lane(rate_db_per_day=-0.2, rate_low=-0.3, rate_high=-0.1, moving=True,
                 target_lost_at=WALL_NOW + DAY, edge_reached_at=WALL_NOW + 2 * DAY)
    res = subprocess.run([promtool, "check", "metrics"], capture_output=True, text=True,
                         input=render_drift([lane], WALL_NOW).decode(), timeout=60,
                         check=False)
    assert res.returncode == 0, res.stdout + res.stderr
