"""SNMP credentials (v2c community or v3 USM user) and their pysnmp form."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

from pysnmp.hlapi.v3arch.asyncio import (
    USM_AUTH_HMAC96_SHA,
    USM_AUTH_HMAC128_SHA224,
    USM_AUTH_HMAC192_SHA256,
    USM_AUTH_HMAC256_SHA384,
    USM_AUTH_HMAC384_SHA512,
    USM_PRIV_CFB128_AES,
    USM_PRIV_CFB192_AES,
    USM_PRIV_CFB192_AES_BLUMENTHAL,
    USM_PRIV_CFB256_AES,
    USM_PRIV_CFB256_AES_BLUMENTHAL,
    CommunityData,
    UsmUserData,
)

#: Accepted names, normalised (upper case, "-" and "_" removed) -> pysnmp protocol.
AUTH_PROTOCOLS = {
    "SHA": USM_AUTH_HMAC96_SHA,
    "SHA1": USM_AUTH_HMAC96_SHA,
    "SHA224": USM_AUTH_HMAC128_SHA224,
    "SHA256": USM_AUTH_HMAC192_SHA256,
    "SHA384": USM_AUTH_HMAC256_SHA384,
    "SHA512": USM_AUTH_HMAC384_SHA512,
}
# AES-192/256 need a longer key than SHA-1 gives; two key extensions exist. "AES-192" and
# "AES-256" use draft-blumenthal-aes-usm, as net-snmp's AES192/AES256 do; "AES-192-C" and
# "AES-256-C" use the Reeder extension, as net-snmp's AES192C/AES256C do (measured against
# snmpd 5.9 with SHA-1 auth; with SHA-2 auth both extensions give the same key).
PRIV_PROTOCOLS = {
    "AES": USM_PRIV_CFB128_AES,
    "AES128": USM_PRIV_CFB128_AES,
    "AES192": USM_PRIV_CFB192_AES_BLUMENTHAL,
    "AES256": USM_PRIV_CFB256_AES_BLUMENTHAL,
    "AES192C": USM_PRIV_CFB192_AES,
    "AES256C": USM_PRIV_CFB256_AES,
}


class CredentialsError(ValueError):
    """Credentials that cannot be used; the message never contains a secret."""


def _norm(name: str) -> str:
    return name.upper().replace("-", "").replace("_", "")


@dataclass(slots=True, frozen=True)
class SnmpCredentials:
    """Either a v2c community, or an SNMPv3 user with auth (SHA family) and priv (AES).

    Secrets are excluded from repr. Build with :meth:`v2c` or :meth:`v3`.
    """

    version: str  # "2c" or "3"
    community: str = field(default="", repr=False)
    user: str = ""
    auth_protocol: str = "SHA"  # SHA, SHA-224, SHA-256, SHA-384, SHA-512
    auth_key: str = field(default="", repr=False)
    priv_protocol: str = "AES-128"  # AES-128, AES-192, AES-256 (-C: Reeder key extension)
    priv_key: str = field(default="", repr=False)
    context: str = ""  # SNMPv3 context name; "" is the default context

    @classmethod
    def v2c(cls, community: str) -> SnmpCredentials:
        return cls(version="2c", community=community)

    @classmethod
    def v3(
        cls,
        user: str,
        auth_key: str,
        priv_key: str,
        auth_protocol: str = "SHA",
        priv_protocol: str = "AES-128",
        context: str = "",
    ) -> SnmpCredentials:
        return cls(
            version="3",
            user=user,
            auth_protocol=auth_protocol,
            auth_key=auth_key,
            priv_protocol=priv_protocol,
            priv_key=priv_key,
            context=context,
        )

    def __post_init__(self) -> None:
        if self.version == "2c":
            if not self.community:
                raise CredentialsError("SNMP v2c credentials need a community")
            return
        if self.version != "3":
            raise CredentialsError(f"SNMP version must be '2c' or '3', not {self.version!r}")
        if not self.user:
            raise CredentialsError("SNMPv3 credentials need a user name")
        if _norm(self.auth_protocol) not in AUTH_PROTOCOLS:
            raise CredentialsError(
                f"SNMPv3 auth protocol {self.auth_protocol!r} is not one of "
                "SHA, SHA-224, SHA-256, SHA-384, SHA-512"
            )
        if _norm(self.priv_protocol) not in PRIV_PROTOCOLS:
            raise CredentialsError(
                f"SNMPv3 privacy protocol {self.priv_protocol!r} is not one of "
                "AES-128, AES-192, AES-256, AES-192-C, AES-256-C"
            )
        # RFC 3414 section 11.2: pass phrases shorter than 8 characters are refused.
        if len(self.auth_key) < 8 or len(self.priv_key) < 8:
            raise CredentialsError("SNMPv3 auth and privacy keys must be at least 8 characters")

    @property
    def engine_key(self) -> str:
        """Which pysnmp engine these credentials may share (one per v3 credential set).

        A digest, so the key can sit in dicts and debug output without exposing secrets.
        """
        if self.version == "2c":
            return "2c"
        parts = (
            self.user,
            _norm(self.auth_protocol),
            self.auth_key,
            _norm(self.priv_protocol),
            self.priv_key,
        )
        return "3:" + hashlib.sha256("\0".join(parts).encode()).hexdigest()[:32]

    def describe(self) -> str:
        """Secret-free text for messages: 'v2c' or 'v3 user X (SHA/AES-128)'."""
        if self.version == "2c":
            return "v2c"
        return f"v3 user {self.user!r} ({self.auth_protocol}/{self.priv_protocol})"

    def auth_data(self) -> CommunityData | UsmUserData:
        if self.version == "2c":
            return CommunityData(self.community, mpModel=1)
        return UsmUserData(
            self.user,
            authKey=self.auth_key,
            privKey=self.priv_key,
            authProtocol=AUTH_PROTOCOLS[_norm(self.auth_protocol)],
            privProtocol=PRIV_PROTOCOLS[_norm(self.priv_protocol)],
        )
