"""One validation: `validate`, `check` and `run` refuse the same configs with the same
error, before polling; one error per root cause; a refused start creates nothing."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from lightwarden.fixtures.lab.model import LAB_ENV

SNMP_CRED = {"snmp_v2c": {"community": {"env": "LW_LAB_COMMUNITY"}}}
SSH_CRED = {"ssh": {"username": "lwops", "password": {"env": "LW_LAB_SSH_PASSWORD"}}}


def site(**over) -> dict:
    data = {
        "listen": {"host": "127.0.0.1", "port": 0},
        "credentials": {"v2c": SNMP_CRED, "cli": SSH_CRED},
        "devices": [{"name": "qm-a", "host": "127.0.0.1", "port": 9, "credentials": "v2c"}],
    }
    data.update(over)
    return data


def ssh_device(**over) -> dict:
    return {"name": "qm-b", "host": "127.0.0.1", "port": 9, "protocol": "ssh",
            "credentials": "cli", "platform": "qmos", **over}


BROKEN = {
    "unknown platform": (
        site(devices=[ssh_device(platform="nosuchos")], ssh={"strict_host_keys": False}),
        "nosuchos"),
    "missing secret file": (
        site(credentials={"v2c": {"snmp_v2c": {"community": {"file": "secrets/none"}}}}),
        "secrets/none"),
    "unset secret variable": (
        site(credentials={"v2c": {"snmp_v2c": {"community": {"env": "LW_T_UNSET_VAR"}}}}),
        "LW_T_UNSET_VAR"),
    "missing known_hosts": (
        site(devices=[ssh_device()], ssh={"known_hosts": "no_such_known_hosts"}),
        "no_such_known_hosts"),
    "empty device list": (site(devices=[]), "the list is empty"),
    "plant naming an unknown device": (
        site(plant=[{"a": "qm-a sfp1", "b": "qm-zz sfp1", "km": 1.0}]), "no device named"),
    "alert secret missing": (
        site(alerting={"webhooks": [{"url": "http://127.0.0.1:9/h",
                                     "secret": {"file": "secrets/hook"}}]}), "secrets/hook"),
}


def cli(*args: str, cwd: Path, state: Path) -> subprocess.CompletedProcess[str]:
    env = {k: v for k, v in os.environ.items() if k != "LW_T_UNSET_VAR"}
    env.update(LAB_ENV, STATE_DIRECTORY=str(state))
    return subprocess.run([sys.executable, "-m", "lightwarden.exporters.app.cli", *args],
                          capture_output=True, text=True, timeout=60, cwd=cwd, env=env)


@pytest.mark.parametrize("case", sorted(BROKEN))
def test_validate_check_and_run_refuse_alike_and_create_nothing(case, tmp_path):
    data, needle = BROKEN[case]
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    state = tmp_path / "state"
    errors = {}
    # `check` sends no alerts, so it has no alert destinations to check
    commands = ("validate", "run") if case.startswith("alert") else ("validate", "check", "run")
    for command in commands:
        res = cli(command, "-c", str(path), cwd=tmp_path, state=state)
        assert res.returncode == 2, (command, res.stdout, res.stderr)
        assert "Traceback" not in res.stderr and "unexpected" not in res.stderr, res.stderr
        lines = res.stderr.strip().splitlines()
        assert len(lines) == 1, (command, lines)  # one root cause, one line
        assert needle in lines[0], (command, lines)
        errors[command] = lines[0].split(":", 1)[1]
    assert len(set(errors.values())) == 1, errors
    assert not state.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["site.yaml"]


def test_a_renamed_duplicate_is_one_error_per_cause_not_one_per_reference(tmp_path):
    plant = [{"a": f"qm-a sfp{i}", "b": f"qm-b sfp{i}", "km": 1.0} for i in range(1, 21)]
    devices = [{"name": "qm-a", "host": "127.0.0.1", "port": 9, "credentials": "v2c"},
               {"name": "qm-a", "host": "127.0.0.2", "port": 9, "credentials": "v2c"}]
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(site(devices=devices, plant=plant)))
    res = cli("validate", "-c", str(path), cwd=tmp_path, state=tmp_path / "state")
    lines = res.stderr.strip().splitlines()
    assert res.returncode == 2 and len(lines) == 2, lines
    assert "'qm-a' appears twice" in lines[0]
    assert "no device named 'qm-b' (and 19 more references)" in lines[1]


def test_an_empty_shard_is_fine_and_counts_read_plainly(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(site(shard={"index": 0, "count": 64})))
    res = cli("validate", "-c", str(path), cwd=tmp_path, state=tmp_path / "state")
    assert res.returncode == 0, res.stderr
    assert "ok (1 device, " in res.stdout and "in shard 0 of 64" in res.stdout
    assert "0 overrides, 0 spans" in res.stdout
