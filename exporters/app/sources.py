"""Which sources exist: protocol name -> its device entry model and ``from_config``.

A new source is one entry here (and one member of ``config.Device`` and ``Credential``);
its folder under ``collector/`` holds the model, the credential kinds it accepts
(``CREDENTIAL_KEYS``, which the config checks) and ``from_config``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from lightwarden.collector.entry import BuildContext, ConfigError, DeviceEntry
from lightwarden.collector.snmp import config as snmp
from lightwarden.collector.source import PollSource
from lightwarden.collector.ssh import config as ssh
from lightwarden.exporters.app.config import SiteConfig


@dataclass(slots=True, frozen=True)
class SourceKind:
    device_model: type[DeviceEntry]
    #: the site-wide settings this source reads, from the whole config
    settings: Callable[[SiteConfig], object]
    from_config: Callable[..., PollSource]


def _ssh_settings(cfg: SiteConfig) -> ssh.SshSettings:
    return ssh.SshSettings(known_hosts=cfg.ssh.known_hosts,
                           strict_host_keys=cfg.ssh.strict_host_keys,
                           read_timeout_s=cfg.ssh.read_timeout_s,
                           threads=cfg.poll.ssh_threads, per_device=cfg.poll.ssh_per_device)


SOURCES: dict[str, SourceKind] = {
    snmp.PROTOCOL: SourceKind(snmp.SnmpDevice, lambda _cfg: None,
                              snmp.from_config),
    ssh.PROTOCOL: SourceKind(ssh.SshDevice, _ssh_settings,
                             ssh.from_config),
}


def build_sources(cfg: SiteConfig, devices: list[Any], ctx: BuildContext) -> list[PollSource]:
    """One source per device entry. Reads secrets; errors name device and credentials."""
    out: list[PollSource] = []
    settings: dict[str, object] = {}
    for d in devices:
        kind = SOURCES[d.protocol]
        if d.protocol not in settings:
            settings[d.protocol] = kind.settings(cfg)
        _key, credential = cfg.credentials[d.credentials].given()
        try:
            out.append(kind.from_config(d, credential, ctx, settings[d.protocol]))
        except ConfigError as exc:
            raise ConfigError(f"device {d.name!r} (credentials {d.credentials!r}): {exc}") \
                from None
    return out


__all__ = ["SOURCES", "SourceKind", "build_sources"]
