"""The fault matrix against one running monitor (`lightwarden run` in its own process).

Peers, all on 127.0.0.1: net-snmp snmpd (fixtures/snmpd: a healthy reference agent,
one v2c and one v3 agent that are stopped and restarted, a wrong community against the
reference, a relay in front of it that cuts table walks short), a UDP socket that never
answers, and the lab's SSH command line with one
listener per fault (fixtures/lab/ssh_cli.py CliFaults). Timeouts are short so the test
stays quick. For every fault: the process survives, the reference devices keep their
schedule, health says what happened (up / partial / down, its kind and since when) in
the metrics and the JSON the page is built from, and no reading of a device that stopped
answering is served as fresh once it is older than poll.stale_after_s.

The README's fault table is this test's table (FAULTS below).
"""

from __future__ import annotations

import json
import os
import re
import socket
import sys
import time
import urllib.request
from pathlib import Path

import pytest
import yaml
from support.cut_walk import CutWalkRelay
from support.procs import Proc, wait_for
from support.snmpd import SnmpdAgent, start_snmpd

from lightwarden.fixtures.lab.model import LAB_SSH_PASSWORD, LAB_SSH_USER, Lab, LabClock
from lightwarden.fixtures.lab.ssh_cli import LabSshServer

pytestmark = [pytest.mark.external]

INTERVAL = 1.0
#: what a cut page is to our decoder: an answer it cannot decode (collector/snmp/wire.py)
CUT_KIND = "protocol"
STALE_AFTER = 4.0
_URL = re.compile(r"metrics at (http://\S+)/metrics")
OPENER = urllib.request.build_opener(urllib.request.ProxyHandler({}))

#: device -> (fault, health expected while it lasts, error kind expected or "")
FAULTS = {
    "qm-ref-snmp": ("none (reference, SNMP v2c; dataset has an unavailable and a "
                    "garbage row)", "up", ""),
    "qm-ref-ssh": ("none (reference, SSH)", "up", ""),
    "qm-v2c-restart": ("SNMP v2c agent stopped, then restarted", "down", "timeout"),
    "qm-v3-restart": ("SNMPv3 agent stopped, then restarted", "down", "timeout"),
    "qm-wrong-community": ("wrong v2c community (dropped silently by the agent)", "down",
                           "timeout"),
    "qm-silent": ("no answer at all (timeout)", "down", "timeout"),
    # discovered while whole, then every table page arrives cut half-way: see below
    "qm-cut-walk": ("SNMP walk cut short (table pages arrive cut half-way)", "up", ""),
    "qm-f-auth": ("SSH wrong password", "down", "auth"),
    "qm-f-hostkey": ("SSH host key changed", "down", "hostkey"),
    "qm-f-hang": ("SSH command hangs", "down", "timeout"),
    "qm-f-drop": ("SSH session dropped mid-output", "down", "dropped"),
    "qm-f-malformed": ("one malformed CLI row", "partial", "parse"),
    "qm-f-odd": ("implausible and garbage values in CLI cells", "partial", "parse"),
}
SSH_LISTENERS = {"qm-ref-ssh": "qm-dist-b", "qm-f-auth": "qm-core-a",
                 "qm-f-hostkey": "qm-core-b", "qm-f-hang": "qm-dist-a",
                 "qm-f-drop": "qm-dist-b", "qm-f-malformed": "qm-core-b",
                 "qm-f-odd": "qm-core-a"}


def get_json(url: str) -> dict:
    with OPENER.open(url + "/api/optics", timeout=10) as r:
        return json.loads(r.read())


def metric_lines(url: str) -> list[str]:
    with OPENER.open(url + "/metrics", timeout=10) as r:
        return r.read().decode().splitlines()


def health_of(url: str) -> dict[str, dict]:
    return {d["device"]: d for d in get_json(url)["devices"]}


def metric_health(lines: list[str], device: str) -> str | None:
    for ln in lines:
        if (ln.startswith("lightwarden_device_health{") and f'device="{device}"' in ln
                and float(ln.rsplit(" ", 1)[1]) == 1):
            return re.search(r'health="(\w+)"', ln).group(1)  # type: ignore[union-attr]
    return None


def has_readings(lines: list[str], device: str) -> bool:
    return any(ln.startswith(("lightwarden_rx_power_dbm{", "lightwarden_temperature_celsius{"))
               and f'device="{device}"' in ln for ln in lines)


@pytest.fixture
def peers(tmp_path):
    lab = Lab.load()
    ref = start_snmpd(tmp_path / "ref")
    v2c = start_snmpd(tmp_path / "v2c")
    v3 = start_snmpd(tmp_path / "v3")
    silent = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    silent.bind(("127.0.0.1", 0))
    cut = CutWalkRelay(ref.port).start()
    ssh = LabSshServer(lab, LabClock(lab.epoch + 3600, speed=0), listeners=SSH_LISTENERS,
                       known_hosts_path=tmp_path / "known_hosts")
    ssh.start()
    try:
        yield {"ref": ref, "v2c": v2c, "v3": v3, "silent": silent.getsockname()[1],
               "ssh": ssh, "tmp": tmp_path, "cut": cut}
    finally:
        cut.stop()
        ssh.stop()
        silent.close()
        for a in (ref, v2c, v3):
            a.stop()


def site(p: dict) -> dict:
    ref: SnmpdAgent = p["ref"]
    v3: SnmpdAgent = p["v3"]
    ssh: LabSshServer = p["ssh"]

    def snmp(name: str, port: int, cred: str) -> dict:
        return {"name": name, "host": "127.0.0.1", "port": port, "credentials": cred}

    devices = [
        snmp("qm-ref-snmp", ref.port, "ref"),
        snmp("qm-v2c-restart", p["v2c"].port, "v2c"),
        snmp("qm-v3-restart", v3.port, "v3"),
        snmp("qm-wrong-community", ref.port, "wrong"),
        snmp("qm-silent", p["silent"], "ref"),
        snmp("qm-cut-walk", p["cut"].port, "ref"),
    ] + [{"name": n, "host": "127.0.0.1", "port": ssh.port(n), "protocol": "ssh",
          "platform": "qmos", "credentials": "cli"} for n in SSH_LISTENERS]
    return {
        "site": "quillmoor-faults",
        "state_dir": str(p["tmp"] / "state"),
        "listen": {"host": "127.0.0.1", "port": 0},
        "poll": {"interval_s": INTERVAL, "jitter_s": 0.0, "timeout_s": 0.5, "retries": 0,
                 "max_backoff_s": 2.0, "stale_after_s": STALE_AFTER},
        "ssh": {"known_hosts": str(ssh.known_hosts), "read_timeout_s": 2.0},
        "conditions": {"hold_s": 0.0, "clear_hold_s": 0.0},
        "history": {"enabled": False},
        "credentials": {
            "ref": {"snmp_v2c": {"community": {"env": "LW_T_REF"}}},
            "v2c": {"snmp_v2c": {"community": {"env": "LW_T_V2C"}}},
            "wrong": {"snmp_v2c": {"community": {"env": "LW_T_WRONG"}}},
            "v3": {"snmp_v3": {"user": v3.v3user, "auth_protocol": "SHA",
                               "auth_key": {"env": "LW_T_V3_AUTH"},
                               "priv_protocol": "AES-128",
                               "priv_key": {"env": "LW_T_V3_PRIV"}}},
            "cli": {"ssh": {"username": LAB_SSH_USER,
                            "password": {"env": "LW_T_SSH_PASSWORD"}}},
        },
        "devices": devices,
    }


def test_fault_matrix(peers):
    p = peers
    ssh: LabSshServer = p["ssh"]
    ssh.faults("qm-f-auth").wrong_password = True
    ssh.change_host_key("qm-f-hostkey")
    ssh.faults("qm-f-hang").hang = True
    ssh.faults("qm-f-drop").drop_after_lines = 4
    ssh.faults("qm-f-malformed").malformed_row = "sfp3"
    ssh.faults("qm-f-odd").odd_cells = {"sfp1": {"temp": "99999999"},
                                       "sfp2": {"rx": "+99999"}, "sfp3": {"bias": "²"}}
    path = p["tmp"] / "site.yaml"
    path.write_text(yaml.safe_dump(site(p)))
    env = {**os.environ, "LW_T_REF": p["ref"].community, "LW_T_V2C": p["v2c"].community,
           "LW_T_WRONG": "not-the-community", "LW_T_V3_AUTH": p["v3"].authkey,
           "LW_T_V3_PRIV": p["v3"].privkey, "LW_T_SSH_PASSWORD": LAB_SSH_PASSWORD}
    proc = Proc([sys.executable, "-m", "lightwarden.exporters.app.cli", "run", "-c",
                 str(path)], p["tmp"] / "monitor.log", env=env)
    figures: dict[str, float] = {}
    restarted: list[SnmpdAgent] = []
    try:
        m = wait_for(lambda: _URL.search(proc.log_tail(100_000))
                     or proc.popen.poll() is not None, 60, "the monitor to start")
        assert proc.popen.poll() is None, proc.log_tail()
        url = m.group(1)

        # -- every device settles in its expected health, the same in JSON and metrics --
        def settled() -> bool:
            h = health_of(url)
            want = {n: e for n, (_f, e, _k) in FAULTS.items() if "restart" not in n}
            return all(n in h and h[n]["health"] == e for n, e in want.items())

        wait_for(settled, 60, "every device in its expected health")
        h, lines = health_of(url), metric_lines(url)
        for name, (_fault, health, kind) in FAULTS.items():
            if "restart" in name:
                continue
            d = h[name]
            assert metric_health(lines, name) == d["health"] == health, (name, d)
            assert d["since"] > 0, d
            if kind:
                assert d["error_kind"] == kind, (name, d)
                assert d["reason"].startswith(name + ":"), d
            else:
                assert d["reason"] == "", d
        odd = [r for r in get_json(url)["optics"] if r["device"] == "qm-f-odd"]
        assert any("implausible" in "; ".join(r["notes"]) for r in odd), odd

        # -- a walk cut short: the device alone goes down, saying why ------------------
        p["cut"].cutting = True
        wait_for(lambda: health_of(url)["qm-cut-walk"]["health"] != "up", 30,
                 "qm-cut-walk no longer up")
        d = health_of(url)["qm-cut-walk"]
        assert p["cut"].cut > 0 and d["health"] == "down", d
        assert d["error_kind"] == CUT_KIND and d["reason"].startswith("qm-cut-walk:"), d
        assert "truncated" in d["reason"], d  # the reason says the answer was cut
        assert health_of(url)["qm-ref-snmp"]["health"] == "up"  # the same agent, whole

        # -- agents stopped: down, then their readings leave the metrics ----------------
        p["v2c"].stop()
        p["v3"].stop()
        stopped = time.time()
        for name in ("qm-v2c-restart", "qm-v3-restart"):
            wait_for(lambda n=name: health_of(url)[n]["health"] == "down", 30, f"{name} down")
        assert health_of(url)["qm-v3-restart"]["error_kind"] == "timeout"
        wait_for(lambda: not has_readings(metric_lines(url), "qm-v2c-restart")
                 and not has_readings(metric_lines(url), "qm-v3-restart"),
                 STALE_AFTER + 20, "stale readings withdrawn")
        assert time.time() - stopped >= STALE_AFTER - 1.0  # kept until they were stale
        rows = [r for r in get_json(url)["optics"] if r["device"] == "qm-v3-restart"]
        assert rows and all(r["stale_s"] is not None for r in rows)  # shown, marked stale
        for name in FAULTS:  # never-answering devices never had readings to serve
            if FAULTS[name][1] == "down" and "restart" not in name:
                assert not has_readings(metric_lines(url), name), name

        # -- agents restarted: back within two poll intervals (plus the back-off cap) ---
        # (measured from the agent's start, its own start-up included)
        for name, key in (("qm-v2c-restart", "v2c"), ("qm-v3-restart", "v3")):
            back = time.time()
            restarted.append(start_snmpd(p["tmp"] / key, like=p[key]))
            wait_for(lambda n=name: health_of(url)[n]["health"] == "up", 30, f"{name} back")
            figures[name] = time.time() - back
        # two intervals, plus the 2 s back-off cap the devices reached while down, plus
        # the agent's own start-up
        assert max(figures.values()) <= 2 * INTERVAL + 2.0 + 2.0, figures

        # -- the reference devices kept their schedule throughout ------------------------
        before = health_of(url)["qm-ref-snmp"]["last_success_at"]
        time.sleep(3 * INTERVAL)
        assert health_of(url)["qm-ref-snmp"]["last_success_at"] > before
        assert health_of(url)["qm-ref-ssh"]["health"] == "up"
        assert proc.popen.poll() is None  # survived every fault
    finally:
        proc.stop()
        ssh.clear_faults()
        for agent in restarted:
            agent.stop()
    log = Path(p["tmp"] / "monitor.log").read_text()
    assert "Traceback" not in log
    for secret in (p["ref"].community, p["v3"].authkey, p["v3"].privkey, LAB_SSH_PASSWORD):
        assert secret not in log
    print("fault matrix: back after restart (s):",
          {k: round(v, 1) for k, v in figures.items()})
