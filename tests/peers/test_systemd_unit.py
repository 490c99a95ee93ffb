"""The shipped systemd unit: it verifies, and its ExecStart command line, run with the
environment the unit gives it, starts, polls, and reloads through its ExecReload line.

CI has no systemd as PID 1, so the test plays systemd's part: ``$STATE_DIRECTORY`` set
(StateDirectory=), the config folder read-only (ProtectSystem=strict; as root, a
read-only bind mount in a private mount namespace, which fails writes with EROFS exactly
as the hardened unit does; otherwise a folder this user cannot write), a working
directory nothing may be written to, and ``$MAINPID`` for ExecReload.

source: systemd.exec(5) StateDirectory=/$STATE_DIRECTORY, systemd.service(5)
ExecReload= with $MAINPID; systemd-analyze(1) verify.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest
import yaml
from support.alert_helpers import Receiver
from support.procs import LOOPBACK, Proc, in_ci, wait_for

from lightwarden.fixtures.lab.model import LAB_COMMUNITY, Lab, LabClock
from lightwarden.fixtures.lab.server import LabServers, lab_site_config

pytestmark = [pytest.mark.external]

REPO = Path(__file__).resolve().parents[2]
UNIT = REPO / "deploy/systemd/lightwarden.service"
_URL = re.compile(r"metrics at (http://\S+)/metrics")
OPENER = urllib.request.build_opener(urllib.request.ProxyHandler({}))


def unit_lines(key: str) -> list[str]:
    return [ln.split("=", 1)[1] for ln in UNIT.read_text().splitlines()
            if ln.startswith(key + "=")]


def test_unit_has_what_a_deployment_needs():
    text = UNIT.read_text()
    for line in ("StateDirectory=lightwarden", "ExecReload=/bin/kill -HUP $MAINPID",
                 "Restart=always", "DynamicUser=yes", "ProtectSystem=strict",
                 "NoNewPrivileges=yes", "LoadCredential="):
        assert line in text, line
    assert "WorkingDirectory" not in text  # nothing relies on the working directory


def test_systemd_analyze_verify_passes(tmp_path):
    tool = shutil.which("systemd-analyze")
    if tool is None:
        if in_ci():
            pytest.fail("systemd-analyze not found (Debian package 'systemd'; CI=true)")
        pytest.skip("systemd-analyze not found")
    # verify checks that ExecStart's program exists: point it at this checkout's.
    exe = Path(sys.executable).with_name("lightwarden")
    unit = tmp_path / "lightwarden.service"
    unit.write_text(UNIT.read_text().replace("/opt/lightwarden/bin/lightwarden", str(exe)))
    res = subprocess.run([tool, "verify", str(unit)], capture_output=True, text=True,
                         timeout=60)
    assert res.returncode == 0, res.stderr
    assert "lightwarden.service" not in res.stderr, res.stderr  # no warnings about it


def scrape(url: str) -> str:
    with OPENER.open(url + "/metrics", timeout=5) as r:
        return r.read().decode()


def gauge(text: str, name: str, **labels: str) -> float | None:
    for line in text.splitlines():
        if line.startswith(name) and line[len(name)] in "{ " and all(
                f'{k}="{v}"' in line for k, v in labels.items()):
            return float(line.rsplit(" ", 1)[1])
    return None


def post_reload(url: str) -> tuple[int, str]:
    req = urllib.request.Request(url + "/-/reload", method="POST", data=b"")
    try:
        with OPENER.open(req, timeout=60) as r:
            return r.status, r.read().decode()
    except urllib.error.HTTPError as exc:
        return exc.code, exc.read().decode()


def events(hook: Receiver, device: str) -> list[tuple[str, str]]:
    """(event kind, summary) of each webhook delivery about ``device``."""
    return [(b["event"], b["alert"]["summary"]) for b in hook.bodies()
            if b["alert"]["device"] == device]


def write_site(etc: Path, data: dict) -> None:
    """Replace site.yaml the way an operator (root) would, outside the service's view."""
    if os.geteuid() != 0:
        etc.chmod(0o755)
    (etc / "site.yaml").write_text(yaml.safe_dump(data))
    if os.geteuid() != 0:
        etc.chmod(0o555)


def test_exec_start_polls_and_exec_reload_reloads(tmp_path):
    lab = Lab.load()
    hook = Receiver()
    etc, state, work = tmp_path / "etc-lightwarden", tmp_path / "state", tmp_path / "cwd"
    for d in (etc / "secrets", work):
        d.mkdir(parents=True)
    (etc / "secrets/community").write_text(LAB_COMMUNITY)
    with LabServers(lab, clock=LabClock(lab.epoch, speed=0.0), base_port=0) as servers:
        data = lab_site_config(servers.endpoints, secrets="env")
        every = {d["name"]: d for d in data["devices"]}
        data.update(
            credentials={"lab-v2c": {"snmp_v2c": {"community": {"file": "secrets/community"}}}},
            devices=[every["qm-core-a"]],
            listen={"host": LOOPBACK, "port": 0},
            poll={"interval_s": 1.0, "jitter_s": 0.0, "timeout_s": 2.0, "retries": 1},
            conditions={"hold_s": 0.0, "clear_hold_s": 0.0},
            alerting={"webhooks": [{"url": hook.url}], "resend_interval_s": 2.0},
        )
        data.pop("ssh")
        data["plant"] = [p for p in data["plant"]
                         if p["a"].startswith("qm-core-a") and p["b"].startswith("qm-core-a")]
        write_site(etc, data)
        argv = shlex.split(unit_lines("ExecStart")[0])
        assert argv[0] == "/opt/lightwarden/bin/lightwarden"
        assert argv[1:] == ["run", "-c", "/etc/lightwarden/site.yaml"]
        cmd = [sys.executable, "-m", "lightwarden.exporters.app.cli", *argv[1:-1],
               str(etc / "site.yaml")]
        if os.geteuid() == 0:
            cmd = ["unshare", "-m", "sh", "-c",
                   'mount --bind -o ro "$0" "$0" && exec "$@"', str(etc), *cmd]
        env = {k: v for k, v in os.environ.items() if not k.startswith("LW_LAB")}
        env.update(STATE_DIRECTORY=str(state),
                   **dict(e.split("=", 1) for e in unit_lines("Environment")))
        state.mkdir(mode=0o700)  # systemd creates it before ExecStart
        proc = Proc(cmd, tmp_path / "service.log", cwd=work, env=env)
        try:
            m = wait_for(lambda: _URL.search(proc.log_tail(100_000))
                         or proc.popen.poll() is not None, 60, "the service to start")
            assert proc.popen.poll() is None, proc.log_tail()
            url = m.group(1)
            wait_for(lambda: gauge(scrape(url), "lightwarden_device_up", device="qm-core-a")
                     == 1, 30, "qm-core-a polled")
            wait_for(lambda: any(k == "open" for k, _ in events(hook, "qm-core-a")), 30,
                     "an alert about qm-core-a (the lab's hot receiver and dark port)")
            names = {p.name for p in state.iterdir()}
            assert {"lightwarden-outbox.sqlite", "lightwarden-history.sqlite"} <= names
            assert sorted(p.name for p in etc.iterdir()) == ["secrets", "site.yaml"]
            assert list(work.iterdir()) == []
            assert gauge(scrape(url), "lightwarden_self_config_reload_ok") == 1
            opened = events(hook, "qm-core-a")

            # 1. ExecReload as systemd runs it: add a device, change one (a new source
            # for it; its open alerts and held conditions stay), move the margin target.
            changed = dict(every["qm-core-a"], timeout_s=1.5)
            data["devices"] = [changed, every["qm-dist-a"]]
            data["margins"] = {"sensitivity_db": 4.0, "overload_db": 1.0}
            write_site(etc, data)
            reload_cmd = unit_lines("ExecReload")[0].replace("$MAINPID", str(proc.popen.pid))
            assert subprocess.run(shlex.split(reload_cmd), timeout=10).returncode == 0
            wait_for(lambda: gauge(scrape(url), "lightwarden_device_up", device="qm-dist-a")
                     == 1, 30, "the added device polled after SIGHUP")
            text = scrape(url)
            assert gauge(text, "lightwarden_rx_margin_target_sensitivity_db") == 4.0
            assert proc.popen.poll() is None  # SIGHUP no longer ends the service
            assert "(1 added, 0 removed, 1 changed)" in proc.log_tail(100_000)
            time.sleep(3.0)  # a few polls and a resend interval
            # open alerts of the device that stayed are kept: no resolve, no reopen
            later = events(hook, "qm-core-a")[len(opened):]
            assert not [e for e in later if e[0] in ("resolve", "open")], later

            # 2. A broken config is refused; the running one goes on.
            bad = dict(data, pollx={"interval_s": 1})
            write_site(etc, bad)
            status, body = post_reload(url)
            assert status == 400 and "pollx" in body and "unknown key" in body, body
            assert gauge(scrape(url), "lightwarden_self_config_reload_ok") == 0
            assert "config reload refused" in proc.log_tail(100_000)
            seen = gauge(scrape(url), "lightwarden_device_last_success_timestamp_seconds",
                         device="qm-dist-a")
            wait_for(lambda: (gauge(scrape(url),
                                    "lightwarden_device_last_success_timestamp_seconds",
                                    device="qm-dist-a") or 0) > (seen or 0), 20,
                     "polls to go on under the old config")

            # 3. Removing a device ends its series and resolves its alerts.
            data["devices"] = [every["qm-dist-a"]]
            write_site(etc, data)
            status, body = post_reload(url)
            assert status == 200 and "1 removed" in body, body
            text = scrape(url)
            assert gauge(text, "lightwarden_self_config_reload_ok") == 1
            assert gauge(text, "lightwarden_device_up", device="qm-core-a") is None
            wait_for(lambda: any(k == "resolve" and "no longer reported by qm-core-a" in s
                                 for k, s in events(hook, "qm-core-a")), 30,
                     "qm-core-a's alerts resolved as gone")
            proc.popen.terminate()
            assert proc.popen.wait(40) == 0, proc.log_tail()
        finally:
            proc.stop()
            hook.down()
    assert list(work.iterdir()) == []
    assert "Traceback" not in proc.log_tail(1_000_000)
