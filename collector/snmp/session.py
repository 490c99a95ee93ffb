"""Talking to one SNMP agent: engines per credential set, GETs and multi-column GETBULK walks.

Values come back as plain Python: integers as int, octet strings as str, OIDs as dotted
str, and "no such object/instance" as None. Failures raise :class:`SnmpError` whose
message names the agent and what was being read, and never a secret.
"""

from __future__ import annotations

import asyncio
from collections.abc import Sequence
from typing import Protocol

from pyasn1.type import univ
from pysnmp.hlapi.v3arch.asyncio import (
    ContextData,
    ObjectIdentity,
    ObjectType,
    SnmpEngine,
    UdpTransportTarget,
    bulk_cmd,
    get_cmd,
)
from pysnmp.proto import errind
from pysnmp.proto.rfc1905 import EndOfMibView

from lightwarden.collector.readings import PollErrorKind
from lightwarden.collector.snmp.credentials import SnmpCredentials

Oid = tuple[int, ...]

# USM reports and local security failures: the agent rejected who we are, or how.
_AUTH_ERRORS = (
    errind.UnknownUserName,
    errind.WrongDigest,
    errind.AuthenticationError,
    errind.AuthenticationFailure,
    errind.UnknownSecurityName,
    errind.UnsupportedSecurityLevel,
    errind.UnsupportedAuthProtocol,
    errind.UnsupportedPrivProtocol,
    errind.DecryptionError,
    errind.EncryptionError,
    errind.NoEncryption,
    errind.NoAuthentication,
    errind.NotInTimeWindow,
)

#: Hard ceiling on GETBULK round trips per walk, so a misbehaving agent cannot loop us.
MAX_WALK_REQUESTS = 10_000


class _ErrorStatus(Protocol):
    """pysnmp's errorStatus value (untyped there): false when 0, named by prettyPrint."""

    def __bool__(self) -> bool: ...

    def prettyPrint(self) -> str: ...


class SnmpError(Exception):
    """A failed SNMP exchange; ``kind`` is TIMEOUT, AUTH, PROTOCOL or TRANSPORT."""

    def __init__(self, kind: PollErrorKind, message: str) -> None:
        super().__init__(message)
        self.kind = kind
        self.message = message


def parse_oid(text: str) -> Oid:
    return tuple(int(part) for part in text.strip(".").split("."))


def plain(value: object, octets: bool = False) -> object:
    """A pyasn1/pysnmp value as plain Python; None for noSuchObject/Instance/endOfMibView.

    Octet strings become text, or the raw bytes with ``octets`` (binary columns such as
    module memory maps).
    """
    if isinstance(value, univ.Null):
        return None
    if isinstance(value, univ.Integer):
        return int(value)
    if isinstance(value, univ.OctetString):
        raw = bytes(value)
        return raw if octets else raw.decode("utf-8", "replace")
    if isinstance(value, univ.ObjectIdentifier):
        return ".".join(str(part) for part in value)
    return value


#: Requests outstanding at once per pysnmp engine. An engine has one client socket for
#: every device it serves; more answers than its receive buffer holds (208 KiB by default,
#: a discovery page is up to ~9 KB) are dropped there, not at the agents.
ENGINE_OUTSTANDING = 16


class EnginePool:
    """pysnmp engines shared between devices: one for all v2c, one per v3 credential set.

    Engines are tied to the event loop they first run on; make one pool per loop and
    close it when done. Each engine comes with a limit on its requests outstanding
    (``ENGINE_OUTSTANDING``), shared by every session on it.
    """

    def __init__(self, outstanding: int = ENGINE_OUTSTANDING) -> None:
        self._engines: dict[str, SnmpEngine] = {}
        self._limits: dict[str, asyncio.Semaphore] = {}
        self.outstanding = outstanding

    def engine_for(self, credentials: SnmpCredentials) -> SnmpEngine:
        key = credentials.engine_key
        engine = self._engines.get(key)
        if engine is None:
            engine = self._engines[key] = SnmpEngine()
        return engine

    def limit_for(self, credentials: SnmpCredentials) -> asyncio.Semaphore:
        key = credentials.engine_key
        limit = self._limits.get(key)
        if limit is None:
            limit = self._limits[key] = asyncio.Semaphore(self.outstanding)
        return limit

    def __len__(self) -> int:
        return len(self._engines)

    def close(self) -> None:
        for engine in self._engines.values():
            engine.close_dispatcher()
        self._engines.clear()
        self._limits.clear()


class SnmpSession:
    """One agent reached with one set of credentials."""

    def __init__(
        self,
        engine: SnmpEngine,
        credentials: SnmpCredentials,
        host: str,
        port: int = 161,
        *,
        timeout: float = 2.0,
        retries: int = 1,
        max_repetitions: int = 25,
        limit: asyncio.Semaphore | None = None,
    ) -> None:
        self.engine = engine
        # Shared with the engine's other sessions (EnginePool.limit_for).
        self._limit = limit if limit is not None else asyncio.Semaphore(1)
        self.credentials = credentials
        self.host = host
        self.port = port
        self.timeout = timeout
        self.retries = retries
        self.max_repetitions = max_repetitions
        self._auth = credentials.auth_data()
        self._context = ContextData(contextName=credentials.context.encode())
        self._target: UdpTransportTarget | None = None
        self.varbinds = 0  # varbinds received so far (for `lightwarden bench`)

    @property
    def where(self) -> str:
        return f"{self.host}:{self.port}"

    async def _get_target(self, what: str) -> UdpTransportTarget:
        if self._target is None:
            try:
                self._target = await UdpTransportTarget.create(
                    (self.host, self.port), timeout=self.timeout, retries=self.retries
                )
            except Exception as exc:  # resolution or socket errors, named below
                raise SnmpError(
                    PollErrorKind.TRANSPORT,
                    f"cannot reach {self.where} for {what}: {type(exc).__name__}",
                ) from None
        return self._target

    def _fail(self, indication: errind.ErrorIndication, what: str) -> SnmpError:
        if isinstance(indication, errind.RequestTimedOut):
            hint = " (a wrong community is dropped silently and looks the same)"
            return SnmpError(
                PollErrorKind.TIMEOUT,
                f"no answer from {self.where} while reading {what}: "
                f"{self.retries + 1} tries of {self.timeout:g} s"
                + (hint if self.credentials.version == "2c" else ""),
            )
        if isinstance(indication, _AUTH_ERRORS):
            return SnmpError(
                PollErrorKind.AUTH,
                f"SNMPv3 security failure from {self.where} while reading {what} "
                f"as {self.credentials.describe()}: {indication}",
            )
        return SnmpError(
            PollErrorKind.PROTOCOL,
            f"SNMP error from {self.where} while reading {what}: {indication}",
        )

    async def get(
        self, oids: Sequence[str], what: str, *, octets: bool = False
    ) -> dict[str, object]:
        """GET the given instances; absent ones map to None. ``octets``: see :func:`plain`."""
        target = await self._get_target(what)
        async with self._limit:
            indication, status, index, varbinds = await get_cmd(
                self.engine,
                self._auth,
                target,
                self._context,
                *(ObjectType(ObjectIdentity(oid)) for oid in oids),
                lookupMib=False,
            )
        self._check(indication, status, what, f" at varbind {int(index)}")
        self.varbinds += len(varbinds)
        result: dict[str, object] = {oid: None for oid in oids}
        for requested, (_, value) in zip(oids, varbinds, strict=False):
            result[requested] = plain(value, octets)
        return result

    def _check(
        self, indication: object, status: _ErrorStatus, what: str, where: str = ""
    ) -> None:
        """Raise for a transport failure or an error-status answer (errorStatus != 0)."""
        if indication:
            raise self._fail(indication, what)
        if status:
            raise SnmpError(
                PollErrorKind.PROTOCOL,
                f"{self.where} answered {status.prettyPrint()}{where} "
                f"while reading {what}",
            )

    async def walk_columns(
        self, columns: Sequence[str], what: str, *, octets: bool = False
    ) -> dict[str, dict[Oid, object]]:
        """Walk several table columns together with GETBULK.

        Returns ``{column: {index suffix: value}}``. Columns may have holes or different
        lengths; rows are matched by index, never by position. A column stops at the
        first OID outside it (lexicographic walking off the end is not done).
        ``octets`` keeps octet strings as bytes (see :func:`plain`).
        """
        target = await self._get_target(what)
        prefixes = {col: parse_oid(col) for col in columns}
        last: dict[str, Oid] = dict(prefixes)
        results: dict[str, dict[Oid, object]] = {col: {} for col in columns}
        active = list(columns)
        for _ in range(MAX_WALK_REQUESTS):
            if not active:
                return results
            async with self._limit:
                indication, status, _, varbinds = await bulk_cmd(
                    self.engine,
                    self._auth,
                    target,
                    self._context,
                    0,
                    self.max_repetitions,
                    *(ObjectType(ObjectIdentity(".".join(map(str, last[c])))) for c in active),
                    lookupMib=False,
                )
            self._check(indication, status, what)
            self.varbinds += len(varbinds)
            if not varbinds:
                return results
            finished: set[str] = set()
            width = len(active)
            for position, (name, value) in enumerate(varbinds):
                col = active[position % width]
                if col in finished:
                    continue
                oid = tuple(name)
                prefix = prefixes[col]
                if isinstance(value, EndOfMibView) or oid[: len(prefix)] != prefix:
                    finished.add(col)
                    continue
                if oid <= last[col]:
                    raise SnmpError(
                        PollErrorKind.PROTOCOL,
                        f"{self.where} returned OIDs out of order while reading {what}",
                    )
                last[col] = oid
                results[col][oid[len(prefix):]] = plain(value, octets)
            active = [col for col in active if col not in finished]
        raise SnmpError(PollErrorKind.PROTOCOL, f"{self.where}: walk of {what} did not end")
