"""A real Prometheus scrapes the demo and evaluates the rules `lightwarden rules` writes.

source: /work/shared/notes/prometheus.md (Prometheus 2.42 run directly with its own config
and data dir on loopback); alerts read back from Prometheus' own HTTP API
(GET /api/v1/alerts, GET /api/v1/targets).
"""

from __future__ import annotations

import json
import subprocess
import sys
import urllib.parse
import urllib.request

import pytest
from support.demo import DemoProc
from support.lab_findings import LAB_FINDINGS, LINK_LABELS, label_tuple
from support.procs import LOOPBACK, require_binary, start_on_free_port, wait_for

from lightwarden.fixtures.lab.model import Lab

pytestmark = [pytest.mark.external, pytest.mark.slow]

_OPENER = urllib.request.build_opener(urllib.request.ProxyHandler({}))

PROM_CONFIG = """\
global:
  scrape_interval: 1s
  scrape_timeout: 1s
  evaluation_interval: 1s
rule_files:
  - {rules}
scrape_configs:
  - job_name: lightwarden
    static_configs:
      - targets: ["{target}"]
"""


def _get(url: str) -> dict:
    with _OPENER.open(url, timeout=5) as r:
        return json.loads(r.read())


def _hot_receiver_ports() -> set[tuple[str, str]]:
    """Both ends of the hot_receiver story's link (lab.yaml), from the lab model."""
    lab = Lab.load()
    a = lab.devices["qm-core-a"].port("sfp31")
    b = a.link.far(a)
    return {(a.device, a.name), (b.device, b.name)}


@pytest.fixture
def demo(tmp_path):
    d = DemoProc(tmp_path / "demo", duration=150, speed=60, interval=2.0, hold=2.0)
    yield d
    d.stop()


@pytest.fixture
def rules_file(tmp_path):
    """The generator's rules as shipped (the optic rules need no `for:`: the condition
    they read is already held by the rule layer)."""
    out = tmp_path / "lightwarden-alerts.yml"
    res = subprocess.run(
        [sys.executable, "-m", "lightwarden.exporters.app.cli", "rules", "-o", str(out),
         "--drift-for", "1s"],
        capture_output=True, text=True, timeout=60, check=False,
    )
    assert res.returncode == 0, res.stderr
    promtool = require_binary("promtool")
    check = subprocess.run([promtool, "check", "rules", str(out)], capture_output=True,
                           text=True, timeout=60, check=False)
    assert check.returncode == 0, check.stdout + check.stderr
    return out


@pytest.fixture
def prometheus(tmp_path, demo, rules_file):
    binary = require_binary("prometheus")
    cfg = tmp_path / "prometheus.yml"
    cfg.write_text(PROM_CONFIG.format(rules=rules_file, target=f"{LOOPBACK}:{demo.port}"))
    data = tmp_path / "prom-data"
    data.mkdir()

    def argv(port: int) -> list[str]:
        return [
            binary,
            f"--config.file={cfg}",
            f"--storage.tsdb.path={data}",
            f"--web.listen-address={LOOPBACK}:{port}",
            "--log.level=warn",
        ]

    proc, port = start_on_free_port(argv, tmp_path / "prometheus.log", "/-/ready", timeout=60)
    yield f"http://{LOOPBACK}:{port}", proc
    proc.stop()


def _optic_alerts(base: str) -> set[tuple[str, ...]]:
    """Firing optic alerts in Prometheus, as the label sets Alertmanager would key them by."""
    alerts = _get(base + "/api/v1/alerts")["data"]["alerts"]
    return {tuple(sorted(a["labels"].items())) for a in alerts
            if a["state"] == "firing" and a["labels"]["alertname"].startswith("Optic")}


def _pushed_alerts(demo: DemoProc) -> set[tuple[str, ...]]:
    """The demo's own open alerts (what it pushes), as the same label sets."""
    with _OPENER.open(f"http://{LOOPBACK}:{demo.port}/api/optics", timeout=5) as r:
        doc = json.loads(r.read())
    return {tuple(sorted(_pushed_labels(a).items())) for a in doc["alerts"]}


def _pushed_labels(a: dict) -> dict[str, str]:
    """A pushed alert's labels (exporters/alerts/wording.alert_labels) from the API row."""
    if a.get("kind"):  # a link finding: its ends and kind, no lane or quantity
        out = {"alertname": a["alertname"], "severity": a["severity"], "device": a["device"],
               "port": a["port"], "kind": a["kind"]}
        if a["far_device"]:
            out |= {"far_device": a["far_device"], "far_port": a["far_port"]}
        return out
    return {"alertname": a["alertname"], "severity": a["severity"], "device": a["device"],
            "port": a["port"], "lane": str(a["lane"]), "quantity": a["quantity"]}


def test_prometheus_rules_and_pushed_alerts_are_one_definition(demo, prometheus):
    base, proc = prometheus

    def target_up():
        targets = _get(base + "/api/v1/targets")["data"]["activeTargets"]
        return [t for t in targets if t["health"] == "up"]

    up = wait_for(target_up, 60, "Prometheus to scrape the demo successfully", step=0.5)
    assert up[0]["labels"]["job"] == "lightwarden"

    expected = _hot_receiver_ports()

    def overloaded_firing():
        got = [dict(a) for a in _optic_alerts(base) if dict(a)["alertname"] ==
               "OpticRxOverloaded"]
        ports = {(a["device"], a["port"]) for a in got}
        return got if ports >= expected else None

    try:
        got = wait_for(overloaded_firing, 90, "OpticRxOverloaded firing on both "
                       "ends of the hot receiver link", step=1.0)
    except AssertionError as exc:
        raise AssertionError(f"{exc}\nalerts: {_get(base + '/api/v1/alerts')}\n"
                             f"prometheus log:\n{proc.log_tail()}\ndemo log:\n"
                             f"{demo.log_tail()}") from None
    # Only the story's optics are past overload: every other receiver has margin. The
    # label set is the pushed alert's: no job, no instance (aggregated away).
    assert {(a["device"], a["port"]) for a in got} == expected
    for a in got:
        assert set(a) == {"alertname", "severity", "device", "port", "lane", "quantity"}
        assert a["severity"] == "critical" and a["lane"] == "1"

    # The whole set agrees with what the demo pushes: same names, same labels, one per
    # problem. Both move with the lab clock, so wait for a moment they match.
    def names(alerts):
        return {(dict(a)["alertname"], dict(a)["device"], dict(a)["port"]) for a in alerts}

    def same():
        # Settled: both sides agree, and the first cycle's transient is over (a receiver
        # polled before its far end's first poll is dark on its own for one cycle).
        rules, pushed = _optic_alerts(base), _pushed_alerts(demo)
        settled = ("OpticLaserOff", "qm-core-a", "sfp20") in names(rules) and (
            "OpticDark", "qm-dist-b", "sfp20") not in names(rules)
        return (rules, pushed) if rules == pushed and settled else None

    try:
        rules, _ = wait_for(same, 60, "Prometheus's optic alerts to equal the pushed ones",
                            step=1.0)
    except AssertionError as exc:
        raise AssertionError(f"{exc}\nrules: {sorted(_optic_alerts(base))}\n"
                             f"pushed: {sorted(_pushed_alerts(demo))}") from None
    got_names = names(rules)
    # One definition of dark: the laser that is off at qm-core-a sfp20 (dark_port story)
    # is one alert, from both; its far receiver's darkness is caused by it and silent.
    assert ("OpticLaserOff", "qm-core-a", "sfp20") in got_names
    assert ("OpticDark", "qm-dist-b", "sfp20") not in got_names

    # The lab's consistency stories are part of that one set: one OpticLinkMismatch per
    # finding, with exactly the pushed alert's labels (job and instance aggregated away).
    links = {label_tuple(dict(a)) for a in rules if dict(a)["alertname"] == "OpticLinkMismatch"}
    assert links == LAB_FINDINGS
    assert all(set(dict(a)) == {"alertname", *LINK_LABELS} for a in rules
               if dict(a)["alertname"] == "OpticLinkMismatch")

    # Drift: the monitor's robust slope from the demo's backfilled history reaches
    # Prometheus for the wearing laser's receiver only (lab.yaml laser_wear: -0.06 dB/day),
    # and the drift rule, pending after one second, has fired on no lane at all.
    def drift_series():
        q = urllib.parse.quote("lightwarden_rx_drift_db_per_day")
        got = _get(f"{base}/api/v1/query?query={q}")["data"]["result"]
        return got or None

    series = wait_for(drift_series, 60, "the drift gauge in Prometheus", step=1.0)
    assert {(r["metric"]["device"], r["metric"]["port"]) for r in series} == {
        ("qm-core-a", "sfp5")}
    assert -0.07 < float(series[0]["value"][1]) < -0.05
    alerts = _get(base + "/api/v1/alerts")["data"]["alerts"]
    assert not [a for a in alerts if a["labels"]["alertname"] == "LightwardenRxFastDrift"]

    # Ending the demo the way a service manager does is a clean exit.
    assert demo.terminate() == 0, demo.log_tail()
