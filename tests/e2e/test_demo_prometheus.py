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
    """The generator's rules with short `for:` durations (its own options, nothing edited)."""
    out = tmp_path / "lightwarden-alerts.yml"
    res = subprocess.run(
        [sys.executable, "-m", "lightwarden.exporters.app.cli", "rules", "-o", str(out),
         "--margin-for", "5s", "--past-edge-for", "3s", "--dark-for", "3s",
         "--alarm-for", "3s", "--drift-for", "1s"],
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


def test_prometheus_fires_the_overload_rule_for_the_hot_receiver(demo, prometheus):
    base, proc = prometheus

    def target_up():
        targets = _get(base + "/api/v1/targets")["data"]["activeTargets"]
        return [t for t in targets if t["health"] == "up"]

    up = wait_for(target_up, 60, "Prometheus to scrape the demo successfully", step=0.5)
    assert up[0]["labels"]["job"] == "lightwarden"

    expected = _hot_receiver_ports()

    def firing(alertname: str):
        alerts = _get(base + "/api/v1/alerts")["data"]["alerts"]
        return [a for a in alerts if a["labels"]["alertname"] == alertname
                and a["state"] == "firing"]

    def overloaded_firing():
        got = firing("LightwardenRxOverloaded")
        ports = {(a["labels"]["device"], a["labels"]["port"]) for a in got}
        return got if ports >= expected else None

    try:
        got = wait_for(overloaded_firing, 90, "LightwardenRxOverloaded firing on both "
                       "ends of the hot receiver link", step=1.0)
    except AssertionError as exc:
        raise AssertionError(f"{exc}\nalerts: {_get(base + '/api/v1/alerts')}\n"
                             f"prometheus log:\n{proc.log_tail()}\ndemo log:\n"
                             f"{demo.log_tail()}") from None
    # Only the story's optics are past overload: every other receiver in the lab has margin.
    assert {(a["labels"]["device"], a["labels"]["port"]) for a in got} == expected
    for a in got:
        assert a["labels"]["severity"] == "critical"
        assert a["labels"]["lane"] == "1"
        assert a["labels"]["job"] == "lightwarden"
        # margin to overload <= 0: the alert's value is the margin itself
        assert float(a["value"]) <= 0.0
        assert "pad" in a["annotations"]["advice"]
        assert "never look into a fibre end" in a["annotations"]["caution"].lower()
        assert f"{a['labels']['device']} {a['labels']['port']} lane 1" in \
            a["annotations"]["summary"]

    # The dark_port story (qm-dist-b sfp20 receives no light) fires the dark rule too.
    dark = wait_for(lambda: firing("LightwardenOpticDark"), 60, "LightwardenOpticDark firing",
                    step=1.0)
    assert {(a["labels"]["device"], a["labels"]["port"]) for a in dark} == {
        ("qm-dist-b", "sfp20")
    }

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
