"""The SNMP source's site-config entry, its credentials, and how it builds itself."""

from __future__ import annotations

import re
from typing import TYPE_CHECKING, Literal

from pydantic import field_validator

from lightwarden.collector.entry import (
    BuildContext,
    DeviceEntry,
    EntryModel,
    Secret,
    no_inline_secret,
)

if TYPE_CHECKING:  # pysnmp is imported only when a source is built, not to read a config
    from lightwarden.collector.snmp.credentials import SnmpCredentials
    from lightwarden.collector.snmp.source import SnmpSource

PROTOCOL = "snmp"
#: the keys of a site credential entry this source accepts
CREDENTIAL_KEYS = ("snmp_v2c", "snmp_v3")


class SnmpV2c(EntryModel):
    community: Secret

    _check = field_validator("community", mode="before")(no_inline_secret)


class SnmpV3(EntryModel):
    user: str
    auth_protocol: Literal["SHA", "SHA-224", "SHA-256", "SHA-384", "SHA-512"] = "SHA-256"
    auth_key: Secret
    priv_protocol: Literal["AES-128", "AES-192", "AES-256", "AES-192-C", "AES-256-C"] = "AES-128"
    priv_key: Secret
    context: str = ""

    _check = field_validator("auth_key", "priv_key", mode="before")(no_inline_secret)


class SnmpDevice(DeviceEntry):
    """A switch polled over SNMP (the default when an entry names no protocol)."""

    protocol: Literal["snmp"] = "snmp"
    #: column (indexed by ifIndex) holding each module's memory map as an OCTET STRING,
    #: e.g. "1.3.6.1.4.1.32473.7.1.1" on the lab; read at discovery.
    eeprom_oid: str | None = None

    @field_validator("eeprom_oid")
    @classmethod
    def _numeric_oid(cls, v: str | None) -> str | None:
        if v is not None and not re.fullmatch(r"\.?[0-9]+(\.[0-9]+)+", v.strip()):
            raise ValueError("not a numeric OID such as 1.3.6.1.4.1.32473.7.1.1")
        return v.strip().lstrip(".") if v is not None else None


def credentials_from(credential: SnmpV2c | SnmpV3, ctx: BuildContext) -> SnmpCredentials:
    """Read the secrets a credential entry refers to (only now, when a source is built)."""
    from lightwarden.collector.snmp.credentials import SnmpCredentials

    if isinstance(credential, SnmpV2c):
        return SnmpCredentials.v2c(credential.community.read(ctx.base_dir))
    return SnmpCredentials.v3(
        credential.user,
        credential.auth_key.read(ctx.base_dir),
        credential.priv_key.read(ctx.base_dir),
        auth_protocol=credential.auth_protocol,
        priv_protocol=credential.priv_protocol,
        context=credential.context,
    )


def from_config(device: SnmpDevice, credential: SnmpV2c | SnmpV3, ctx: BuildContext,
                settings: object = None) -> SnmpSource:
    """Build the source for one entry; engines are shared by every SNMP device."""
    from lightwarden.collector.snmp.fast import SocketPool
    from lightwarden.collector.snmp.session import EnginePool
    from lightwarden.collector.snmp.source import SnmpSource

    engines = ctx.shared.get("snmp.engines", EnginePool, EnginePool.close)
    sockets = ctx.shared.get("snmp.sockets", SocketPool, SocketPool.close)
    return SnmpSource(
        device.name, device.host, credentials_from(credential, ctx),
        port=device.port or 161,
        timeout=device.timeout_s or ctx.timeout_s,
        retries=device.retries if device.retries is not None else ctx.retries,
        pmd_names=ctx.pmd_names, engines=engines, sockets=sockets,
        eeprom_oid=device.eeprom_oid,
    )
