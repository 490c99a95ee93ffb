"""The one state directory: where everything lightwarden writes lives.

Chosen, first match wins: ``--state-dir``, the config's ``state_dir`` key,
``$STATE_DIRECTORY`` (systemd's ``StateDirectory=`` sets it; when it lists several
folders, separated by ``:``, the first is ours), ``$XDG_STATE_HOME/lightwarden``, else
``~/.local/state/lightwarden`` (the XDG Base Directory default for state).

Relative state paths in the config (``history.path``, ``alerting.outbox_path``,
``ssh.known_hosts``) resolve against it, never against the config file's folder or the
working directory: a config may sit in a read-only ``/etc`` folder, and a checkout's
working directory is nobody's state. Nothing is created here until something is written.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

from lightwarden.collector.entry import ConfigError

APP = "lightwarden"


def default_state_dir(env: Mapping[str, str] | None = None) -> Path:
    """The state directory when neither the command line nor the config names one."""
    env = os.environ if env is None else env
    systemd = env.get("STATE_DIRECTORY", "")
    if systemd:
        return Path(systemd.split(":", 1)[0])
    xdg = env.get("XDG_STATE_HOME", "")
    # The XDG spec says a relative value is invalid and must be ignored.
    if xdg and Path(xdg).is_absolute():
        return Path(xdg) / APP
    home = env.get("HOME") or str(Path.home())
    return Path(home) / ".local" / "state" / APP


def resolve_state_dir(cli: str | None, config_key: str | None,
                      env: Mapping[str, str] | None = None,
                      config_dir: Path | None = None) -> Path:
    """The state directory, absolute. A relative ``config_key`` is taken from the config
    file's folder (it is written in that file); a relative ``cli`` from the working
    directory (it is typed there)."""
    if cli:
        return Path(cli).expanduser().resolve()
    if config_key:
        p = Path(config_key).expanduser()
        if not p.is_absolute():
            p = (config_dir or Path.cwd()) / p
        return p.resolve()
    return default_state_dir(env).expanduser().resolve()


def state_path(state_dir: Path, value: str) -> Path:
    """A configured state file: absolute as written, else inside the state directory."""
    p = Path(value).expanduser()
    return p if p.is_absolute() else state_dir / p


def ensure_state_dir(state_dir: Path) -> Path:
    """Create the state directory (mode 0700: it holds alert state and readings)."""
    try:
        state_dir.mkdir(parents=True, exist_ok=True, mode=0o700)
    except OSError as exc:
        raise ConfigError(f"state directory {state_dir}: cannot create it: "
                          f"{exc.strerror or exc}") from None
    if not os.access(state_dir, os.W_OK | os.X_OK):
        raise ConfigError(f"state directory {state_dir}: not writable by this user")
    return state_dir
