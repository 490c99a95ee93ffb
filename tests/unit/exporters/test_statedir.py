"""One state directory: how it is chosen, and that nothing we write lands elsewhere.

source: XDG Base Directory Specification 0.8 ($XDG_STATE_HOME, default ~/.local/state;
a relative value is invalid and ignored); systemd.exec(5) StateDirectory= (sets
$STATE_DIRECTORY, several folders separated by ':').
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
from pathlib import Path

import yaml

from lightwarden.exporters.app.config import parse_config
from lightwarden.exporters.app.statedir import default_state_dir, resolve_state_dir, state_path
from lightwarden.exporters.app.wiring import build_monitor
from lightwarden.fixtures.lab.model import LAB_ENV


def test_precedence_cli_then_config_then_systemd_then_xdg_then_home(tmp_path):
    env = {"STATE_DIRECTORY": "/var/lib/lw-a:/var/lib/lw-b", "XDG_STATE_HOME": "/x",
           "HOME": "/home/q"}
    assert resolve_state_dir("/cli", "/key", env) == Path("/cli")
    assert resolve_state_dir(None, "/key", env) == Path("/key")
    assert resolve_state_dir(None, None, env) == Path("/var/lib/lw-a")  # the first one
    assert default_state_dir({"XDG_STATE_HOME": "/x", "HOME": "/home/q"}) == Path(
        "/x/lightwarden")
    # XDG: a relative $XDG_STATE_HOME is ignored, the default is ~/.local/state
    assert default_state_dir({"XDG_STATE_HOME": "rel", "HOME": "/home/q"}) == Path(
        "/home/q/.local/state/lightwarden")


def test_relative_key_is_from_the_config_folder_and_cli_from_the_working_dir(tmp_path):
    conf = tmp_path / "etc"
    assert resolve_state_dir(None, "st", {}, config_dir=conf) == conf / "st"
    assert resolve_state_dir("st", None, {}) == Path.cwd() / "st"


def test_state_paths_resolve_in_the_state_dir_never_the_config_folder(tmp_path):
    state = tmp_path / "state"
    assert state_path(state, "h.sqlite") == state / "h.sqlite"
    assert state_path(state, "/abs/h.sqlite") == Path("/abs/h.sqlite")
    cfg = parse_config(yaml.safe_dump({"devices": []}))
    m = build_monitor(cfg, base_dir=tmp_path / "etc", state_dir=state, alerts=False)
    assert m.parts.state_dir == state
    h = m.open_history()
    assert h is not None
    try:
        assert Path(h.path) == state / "lightwarden-history.sqlite"
        assert (state.stat().st_mode & 0o777) == 0o700  # it holds readings and alert state
    finally:
        m.close()
    assert not (tmp_path / "etc").exists()


def _cli(*args: str, cwd: Path, env: dict[str, str], timeout: float = 90):
    clean = {k: v for k, v in os.environ.items()
             if k not in ("STATE_DIRECTORY", "XDG_STATE_HOME")}
    return subprocess.run([sys.executable, "-m", "lightwarden.exporters.app.cli", *args],
                          capture_output=True, text=True, timeout=timeout, cwd=cwd,
                          env={**clean, **env})


def test_lab_writes_nothing_to_the_working_directory(tmp_path):
    work, home = tmp_path / "work", tmp_path / "home"
    work.mkdir()
    res = _cli("lab", "--port", "0", "--duration", "1", cwd=work, env={"HOME": str(home)})
    assert res.returncode == 0, res.stderr
    assert list(work.iterdir()) == []
    known = home / ".local/state/lightwarden/lab_known_hosts"
    assert known.is_file() and str(known) in res.stdout


def test_a_failed_start_creates_nothing(tmp_path):
    """Port in use: a clear error, and no state directory, history or outbox made."""
    state = tmp_path / "state"
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        port = busy.getsockname()[1]
        site = tmp_path / "site.yaml"
        site.write_text(yaml.safe_dump({
            "listen": {"host": "127.0.0.1", "port": port},
            "credentials": {"c": {"snmp_v2c": {"community": {"env": "LW_LAB_COMMUNITY"}}}},
            "devices": [{"name": "qm-x", "host": "127.0.0.1", "port": 9, "credentials": "c"}],
            "alerting": {"webhooks": [{"url": "http://127.0.0.1:9/hook"}]},
        }))
        res = _cli("run", "-c", str(site), cwd=tmp_path,
                   env={**LAB_ENV, "STATE_DIRECTORY": str(state)})
    assert res.returncode == 2
    assert str(port) in res.stderr and "Traceback" not in res.stderr
    assert not state.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["site.yaml"]
