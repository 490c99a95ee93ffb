"""The SSH source's site-config entry, its login, its site-wide settings, and how it
builds itself."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Literal

from pydantic import Field, field_validator, model_validator

from lightwarden.collector.entry import (
    BuildContext,
    ConfigError,
    DeviceEntry,
    EntryModel,
    Secret,
    no_inline_secret,
)

if TYPE_CHECKING:  # netmiko is imported only when a source is built, not to read a config
    from lightwarden.collector.ssh.platforms.platform import Platform
    from lightwarden.collector.ssh.source import SshSource

PROTOCOL = "ssh"
CREDENTIAL_KEYS = ("ssh",)


class SshLogin(EntryModel):
    username: str
    password: Secret | None = None
    key_file: str | None = None
    passphrase: Secret | None = None

    _check = field_validator("password", "passphrase", mode="before")(no_inline_secret)

    @model_validator(mode="after")
    def _some_auth(self) -> SshLogin:
        if self.password is None and self.key_file is None:
            raise ValueError("give 'password' or 'key_file'")
        return self


class SshDevice(DeviceEntry):
    """A switch whose optics are read from its command line over SSH."""

    protocol: Literal["ssh"]
    platform: str = Field(min_length=1)  # platform definition name or path
    known_hosts: str | None = None  # overrides ssh.known_hosts
    #: read each module's memory map once (needs the platform's eeprom command)
    read_maps: bool = False


@dataclass(slots=True, frozen=True)
class SshSettings:
    """Site-wide SSH settings (the site config's ``ssh`` and ``poll`` sections)."""

    known_hosts: str | None = None  # strict host-key checking against this file
    strict_host_keys: bool = True
    read_timeout_s: float = 20.0
    threads: int = 16
    per_device: int = 1


def _platform(ref: str, ctx: BuildContext) -> Platform:
    from lightwarden.collector.ssh.platforms.platform import PlatformError, load_platform

    cache: dict[str, Platform] = ctx.shared.get("ssh.platforms", dict, lambda _p: None)
    if ref not in cache:
        path = Path(ref)
        if path.suffix in (".yaml", ".yml") and not path.is_absolute():
            path = ctx.base_dir / path
        try:
            cache[ref] = load_platform(path if path.suffix else ref)
        except PlatformError as exc:
            raise ConfigError(str(exc)) from None
    return cache[ref]


def from_config(device: SshDevice, credential: SshLogin, ctx: BuildContext,
                settings: SshSettings | None = None) -> SshSource:
    """Build the source for one entry; the SSH thread pool is shared by every device."""
    from lightwarden.collector.ssh.source import SshCredentials, SshSource, SshWorkers

    s = settings or SshSettings()
    workers = ctx.shared.get("ssh.workers", lambda: SshWorkers(s.threads),
                             lambda w: w.shutdown(wait=False))
    known = device.known_hosts or s.known_hosts
    if known is not None and not Path(known).is_absolute():
        # known_hosts is trust state (what ssh keeps in ~/.ssh), so it lives with the
        # rest of our state, not beside a config that may be read-only.
        known = str((ctx.state_dir or ctx.base_dir) / known)
    if known is not None and s.strict_host_keys and not Path(known).expanduser().is_file():
        # Caught before polling: every poll would fail on it (host keys are never
        # accepted blindly).
        raise ConfigError(f"known_hosts file {known} not found (ssh.known_hosts; relative "
                          "paths are in the state directory)")
    timeout = device.timeout_s or ctx.timeout_s
    return SshSource(
        device.name, device.host, _platform(device.platform, ctx),
        SshCredentials(
            credential.username,
            password=credential.password.read(ctx.base_dir) if credential.password else "",
            # a key file is a secret: relative paths resolve like the other secret files
            key_file=(str(ctx.base_dir / credential.key_file)
                      if credential.key_file and not Path(credential.key_file).is_absolute()
                      else credential.key_file),
            key_passphrase=(credential.passphrase.read(ctx.base_dir)
                            if credential.passphrase else ""),
        ),
        workers,
        port=device.port or 22,
        known_hosts=known,
        strict_host_key=s.strict_host_keys,
        connect_timeout=max(timeout, 5.0),
        read_timeout=s.read_timeout_s,
        max_sessions=s.per_device,
        read_maps=device.read_maps,
    )
