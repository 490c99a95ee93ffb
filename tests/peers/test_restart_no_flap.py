"""kill -9 a monitor while a receiver hovers inside its hysteresis band: Alertmanager's
notifications show the alert fired once and was never resolved and reopened.

The lab's hover story (fixtures/lab/lab.yaml: qm-core-b sfp12, Rx -15.0 dBm +- 0.3 dB,
3 dB above the module's declared -18 dBm low alarm, i.e. on the common-practice 3 dB
sensitivity target) is driven by a stopped lab clock the test moves: first 0.3 dB below
the target (near-sensitivity, an alert opens), then 0.3 dB above it, inside the 0.5 dB
hysteresis (our default, rules/hysteresis.py), where the held condition must stay.
A monitor that forgot its held state on restart would adopt the first sample (healthy),
resolve the alert and reopen it later: the flap this test counts.

source: /work/shared/notes/prometheus.md (Alertmanager v2: resolve by endsAt <= now; a
webhook receiver with send_resolved gets "status": "resolved"; short group timers).
"""

from __future__ import annotations

import re
import sys
import time
import urllib.request
from pathlib import Path

import pytest
import yaml
from support.alert_helpers import Receiver
from support.procs import (
    ALERTMANAGER_CONFIG,
    LOOPBACK,
    Proc,
    alertmanager_argv,
    require_binary,
    start_on_free_port,
    wait_for,
)

from lightwarden.fixtures.lab.model import LAB_ENV, Lab, LabClock
from lightwarden.fixtures.lab.server import LabServers, lab_site_config

pytestmark = [pytest.mark.external]

DEVICE, PORT = "qm-core-b", "sfp12"
PERIOD_S = 1800.0  # the hover story's period (lab.yaml)
# hover centre -11.4 dBm = 3 dB above the 10GBASE-LR -14.4 dBm edge (lab.yaml), swing 0.3
BELOW = 0.75 * PERIOD_S  # sin = -1: -11.7 dBm, 0.3 dB below the target
ABOVE = 0.25 * PERIOD_S  # sin = +1: -11.1 dBm, above the target, inside the hysteresis
_URL = re.compile(r"metrics at (http://\S+)/metrics")


@pytest.fixture
def hook():
    r = Receiver()
    yield r
    r.down()


@pytest.fixture
def alertmanager(tmp_path, hook):
    binary = require_binary("prometheus-alertmanager")
    cfg = tmp_path / "alertmanager.yml"
    cfg.write_text(ALERTMANAGER_CONFIG.format(group_wait="100ms", url=hook.url))
    storage = tmp_path / "am-data"
    storage.mkdir()
    proc, port = start_on_free_port(
        lambda p: alertmanager_argv(binary, cfg, storage, p), tmp_path / "am.log", "/-/ready")
    yield f"http://{LOOPBACK}:{port}"
    proc.stop()


def notifications(hook: Receiver) -> list[str]:
    """The status ("firing"/"resolved") of each webhook notification about our port."""
    out = []
    for body in hook.bodies():
        for a in body.get("alerts", []):
            if a["labels"].get("device") == DEVICE and a["labels"].get("port") == PORT:
                out.append(a["status"])
    return out


def rx_seen(url: str) -> float | None:
    opener = urllib.request.build_opener(urllib.request.ProxyHandler({}))
    try:
        text = opener.open(url + "/metrics", timeout=2).read().decode()
    except OSError:
        return None
    for line in text.splitlines():
        if (line.startswith("lightwarden_rx_power_dbm{") and f'device="{DEVICE}"' in line
                and f'port="{PORT}"' in line):
            return float(line.rsplit(" ", 1)[1])
    return None


def start_monitor(site: Path, tmp: Path, n: int) -> tuple[Proc, str]:
    proc = Proc([sys.executable, "-m", "lightwarden.exporters.app.cli", "run", "-c", str(site)],
                tmp / f"monitor-{n}.log")
    try:
        m = wait_for(lambda: _URL.search(proc.log_tail(100_000)) or proc.popen.poll() is not None,
                     60, "the monitor to print its URL")
    except BaseException:
        proc.stop()
        raise
    if proc.popen.poll() is not None:
        raise AssertionError(f"monitor exited:\n{proc.log_tail()}")
    return proc, m.group(1)


def test_kill_9_inside_the_hysteresis_band_neither_resolves_nor_reopens(
        tmp_path, alertmanager, hook, monkeypatch):
    for k, v in LAB_ENV.items():
        monkeypatch.setenv(k, v)
    lab = Lab.load()
    clock = LabClock(lab.epoch + BELOW, speed=0.0)
    with LabServers(lab, clock=clock, base_port=0) as servers:
        data = lab_site_config(servers.endpoints, secrets="env")
        data["devices"] = [d for d in data["devices"] if d["name"] == DEVICE]
        data.update(
            state_dir=str(tmp_path / "state"),
            listen={"host": "127.0.0.1", "port": 0},
            poll={"interval_s": 1.0, "jitter_s": 0.0, "timeout_s": 2.0, "retries": 1},
            conditions={"hold_s": 2.0, "clear_hold_s": 4.0, "hysteresis_db": 0.5},
            history={"enabled": False},
            alerting={"alertmanager": [{"url": alertmanager}], "resend_interval_s": 2.0,
                      "labels": {"site": "quillmoor"}},
        )
        site = tmp_path / "site.yaml"
        site.write_text(yaml.safe_dump(data))
        proc, url = start_monitor(site, tmp_path, 0)
        try:
            wait_for(lambda: "firing" in notifications(hook), 60,
                     "Alertmanager to notify the near-sensitivity alert")
            # Into the band above the target: held near-sensitivity, nothing resolves.
            clock.epoch = lab.epoch + ABOVE
            wait_for(lambda: (v := rx_seen(url)) is not None and v > -15.0, 20,
                     "the monitor to read the level above the target")
            for n in range(1, 4):
                proc.popen.kill()  # kill -9: no handler, no final save
                proc.popen.wait(10)
                proc.stop()
                proc, url = start_monitor(site, tmp_path, n)
                wait_for(lambda u=url: (v := rx_seen(u)) is not None and v > -15.0, 30,
                         "the restarted monitor to poll")
                # several polls, longer than the hold times and a resend interval
                time.sleep(6.0)
        finally:
            proc.stop()
    # Alertmanager's group_wait is 100 ms: a resolve sent before the last kill would
    # long have been notified.
    seen = notifications(hook)
    assert "resolved" not in seen, seen
    assert seen.count("firing") == 1, seen
