"""The steady SNMPv2c poll path: our own GET/GETBULK over asyncio UDP, decoded by ``wire``.

:class:`FastSession` offers the two calls a steady poll makes (``get`` and
``walk_columns``) with the same arguments, results and errors as
:class:`~lightwarden.collector.snmp.session.SnmpSession`, so the source can use either.
Requests are built from a per-device header made once, request ids and OIDs stay bytes,
and responses are decoded straight into values.

:class:`SocketPool` gives each group of devices its own client UDP socket: a fleet does
not queue every response behind one socket's receive buffer (one shared socket dropped
datagrams at 100 devices in flight). Each socket asks for a larger receive buffer; Linux
caps it at ``net.core.rmem_max`` (212,992 bytes by default), which :attr:`SocketGroup.rcvbuf`
reports after the cap.
"""

from __future__ import annotations

import asyncio
import contextlib
import random
import socket
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import partial
from typing import cast

from lightwarden.collector.readings import PollErrorKind
from lightwarden.collector.snmp.credentials import SnmpCredentials
from lightwarden.collector.snmp.session import MAX_WALK_REQUESTS, Oid, SnmpError
from lightwarden.collector.snmp.wire import (
    END_OF_MIB_VIEW,
    OBJECT_IDENTIFIER,
    RequestTemplate,
    Response,
    WireError,
    decode_response,
    oid_bytes,
    oid_text,
    peek_request_id,
    sub_ids,
    varbind_list,
)

#: Devices sharing one client socket. Each device has at most one request outstanding,
#: so a group's socket holds at most this many responses waiting to be read.
GROUP_SIZE = 16
#: Receive buffer asked for per socket (the kernel caps it at net.core.rmem_max).
RCVBUF_BYTES = 1 << 20
_MAX_REQUEST_ID = 2**31 - 1

Address = tuple[str, int]


@dataclass(slots=True)
class _Pending:
    address: Address
    future: asyncio.Future[bytes]


class SocketGroup(asyncio.DatagramProtocol):
    """One client UDP socket; responses are matched to requests by request-id and sender."""

    def __init__(self) -> None:
        self.transport: asyncio.DatagramTransport | None = None
        self.members = 0
        self.rcvbuf = 0
        self.stray = 0  # datagrams that matched no outstanding request (late, foreign, junk)
        self._pending: dict[int, _Pending] = {}
        self._next_id = random.randint(1, _MAX_REQUEST_ID)

    def connection_made(self, transport: asyncio.BaseTransport) -> None:
        # A datagram endpoint's transport; asyncio's selector class does not subclass
        # DatagramTransport, so this is a cast, not a check.
        self.transport = cast(asyncio.DatagramTransport, transport)
        sock = transport.get_extra_info("socket")
        if sock is not None:
            # On refusal the default buffer stays; only the headroom is lost.
            with contextlib.suppress(OSError):
                sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, RCVBUF_BYTES)
            # Linux reports twice the granted size (it counts its own overhead).
            self.rcvbuf = sock.getsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF) // 2

    def datagram_received(self, data: bytes, addr: tuple[str | object, ...]) -> None:
        try:
            request_id = peek_request_id(data)
        except WireError:
            self.stray += 1
            return
        pending = self._pending.get(request_id)
        if pending is None or (addr[0], addr[1]) != pending.address:
            self.stray += 1
            return
        if not pending.future.done():
            pending.future.set_result(data)

    def error_received(self, exc: Exception) -> None:
        # ICMP errors on an unconnected socket cannot be tied to one request; the
        # request concerned times out on its own.
        self.stray += 1

    def connection_lost(self, exc: Exception | None) -> None:
        for pending in self._pending.values():
            if not pending.future.done():
                pending.future.set_exception(ConnectionError("client socket closed"))
        self.transport = None

    def _request_id(self) -> int:
        rid = self._next_id
        self._next_id = rid + 1 if rid < _MAX_REQUEST_ID else 1
        return rid

    async def exchange(
        self, address: Address, build: Callable[[int], bytes], timeout: float, retries: int
    ) -> bytes | None:
        """Send a request (again on each timeout); the response datagram, None if none came.

        A retry resends the same request id, so a late answer to an earlier try counts.
        """
        transport = self.transport
        if transport is None:
            raise ConnectionError("client socket closed")
        request_id = self._request_id()
        while request_id in self._pending:
            request_id = self._request_id()
        message = build(request_id)
        future: asyncio.Future[bytes] = asyncio.get_running_loop().create_future()
        self._pending[request_id] = _Pending(address, future)
        try:
            for _ in range(retries + 1):
                transport.sendto(message, address)
                done, _ = await asyncio.wait((future,), timeout=timeout)
                if done:
                    return future.result()
            return None
        finally:
            del self._pending[request_id]
            if not future.done():
                future.cancel()

    def close(self) -> None:
        if self.transport is not None:
            self.transport.close()


@dataclass(slots=True)
class SocketPool:
    """Client sockets shared by devices, ``group_size`` devices per socket.

    Made once per event loop (sockets belong to the loop they were opened on); close it
    when done.
    """

    group_size: int = GROUP_SIZE
    groups: dict[int, list[SocketGroup]] = field(default_factory=dict)
    _opening: asyncio.Lock | None = None

    async def join(self, family: int) -> SocketGroup:
        """A socket group for one more device of this address family."""
        if self._opening is None:
            self._opening = asyncio.Lock()
        async with self._opening:
            groups = self.groups.setdefault(family, [])
            for group in groups:
                if group.members < self.group_size and group.transport is not None:
                    group.members += 1
                    return group
            local = ("::", 0) if family == socket.AF_INET6 else ("0.0.0.0", 0)
            _, group = await asyncio.get_running_loop().create_datagram_endpoint(
                SocketGroup, local_addr=local, family=family
            )
            group.members = 1
            groups.append(group)
            return group

    def sockets(self) -> int:
        return sum(len(groups) for groups in self.groups.values())

    def close(self) -> None:
        for groups in self.groups.values():
            for group in groups:
                group.close()
        self.groups.clear()


def _plain(tag: int, value: object, octets: bool) -> object:
    """A decoded value as :func:`~lightwarden.collector.snmp.session.plain` gives it."""
    if type(value) is bytes:
        if tag == OBJECT_IDENTIFIER:
            return oid_text(value)
        return value if octets else value.decode("utf-8", "replace")
    return value


class FastSession:
    """One v2c agent, read with our own requests; the steady-poll twin of SnmpSession."""

    def __init__(
        self,
        pool: SocketPool,
        credentials: SnmpCredentials,
        host: str,
        port: int = 161,
        *,
        timeout: float = 2.0,
        retries: int = 1,
        max_repetitions: int = 25,
    ) -> None:
        if credentials.version != "2c":
            raise ValueError("the fast SNMP path speaks v2c only")
        self.pool = pool
        self.credentials = credentials
        self.host = host
        self.port = port
        self.timeout = timeout
        self.retries = retries
        self.max_repetitions = max_repetitions
        self._template = RequestTemplate.v2c(credentials.community)
        self._group: SocketGroup | None = None
        self._address: Address | None = None
        self._prebuilt: dict[tuple[str, ...], tuple[bytes, ...]] = {}
        self.varbinds = 0  # varbinds received so far (for `lightwarden bench`)

    @property
    def where(self) -> str:
        return f"{self.host}:{self.port}"

    async def _connect(self, what: str) -> tuple[SocketGroup, Address]:
        if self._group is not None and self._group.transport is not None and self._address:
            return self._group, self._address
        try:
            infos = await asyncio.get_running_loop().getaddrinfo(
                self.host, self.port, type=socket.SOCK_DGRAM
            )
            family, _, _, _, sockaddr = infos[0]
            self._address = (str(sockaddr[0]), int(sockaddr[1]))
            self._group = await self.pool.join(family)
        except (OSError, IndexError) as exc:
            raise SnmpError(
                PollErrorKind.TRANSPORT,
                f"cannot reach {self.where} for {what}: {type(exc).__name__}",
            ) from None
        return self._group, self._address

    async def _exchange(self, build: Callable[[int], bytes], what: str) -> Response:
        group, address = await self._connect(what)
        try:
            data = await group.exchange(address, build, self.timeout, self.retries)
        except ConnectionError as exc:
            raise SnmpError(
                PollErrorKind.TRANSPORT, f"cannot reach {self.where} for {what}: {exc}"
            ) from None
        if data is None:
            raise SnmpError(
                PollErrorKind.TIMEOUT,
                f"no answer from {self.where} while reading {what}: "
                f"{self.retries + 1} tries of {self.timeout:g} s"
                " (a wrong community is dropped silently and looks the same)",
            )
        try:
            response = decode_response(data)
        except WireError as exc:
            raise SnmpError(
                PollErrorKind.PROTOCOL,
                f"could not decode the answer from {self.where} while reading {what}: {exc}",
            ) from None
        if response.error_status:
            raise SnmpError(
                PollErrorKind.PROTOCOL,
                f"{self.where} answered {response.error_name} at varbind "
                f"{response.error_index} while reading {what}",
            )
        self.varbinds += len(response.oids)
        return response

    def _oids(self, oids: Sequence[str]) -> tuple[bytes, ...]:
        key = tuple(oids)
        found = self._prebuilt.get(key)
        if found is None:
            found = self._prebuilt[key] = tuple(oid_bytes(o) for o in oids)
        return found

    async def get(
        self, oids: Sequence[str], what: str, *, octets: bool = False
    ) -> dict[str, object]:
        """GET the given instances; absent ones map to None (as SnmpSession.get)."""
        varbinds = varbind_list(self._oids(oids))
        template = self._template
        # Absent instances come back as noSuchInstance/noSuchObject, mapped to None.
        response = await self._exchange(partial(template.get, varbinds=varbinds), what)
        result: dict[str, object] = {oid: None for oid in oids}
        for requested, tag, value in zip(oids, response.tags, response.values, strict=False):
            result[requested] = _plain(tag, value, octets)
        return result

    async def walk_columns(
        self, columns: Sequence[str], what: str, *, octets: bool = False
    ) -> dict[str, dict[Oid, object]]:
        """Walk table columns together with GETBULK (as SnmpSession.walk_columns)."""
        prefixes = dict(zip(columns, self._oids(columns), strict=True))
        last = dict(prefixes)  # each column's last OID, as sent back in the next request
        results: dict[str, dict[Oid, object]] = {col: {} for col in columns}
        active = list(columns)
        template, reps = self._template, self.max_repetitions
        for _ in range(MAX_WALK_REQUESTS):
            if not active:
                return results
            varbinds = varbind_list(last[c] for c in active)
            build = partial(template.get_bulk, varbinds=varbinds, max_repetitions=reps)
            response = await self._exchange(build, what)
            if not response.oids:
                return results
            try:
                active = self._take(response, active, prefixes, last, results, octets, what)
            except WireError as exc:
                raise SnmpError(
                    PollErrorKind.PROTOCOL,
                    f"could not decode the answer from {self.where} while reading {what}: "
                    f"{exc}",
                ) from None
        raise SnmpError(PollErrorKind.PROTOCOL, f"{self.where}: walk of {what} did not end")

    def _take(
        self,
        response: Response,
        active: list[str],
        prefixes: dict[str, bytes],
        last: dict[str, bytes],
        results: dict[str, dict[Oid, object]],
        octets: bool,
        what: str,
    ) -> list[str]:
        """File one GETBULK page's varbinds under their columns; the columns still open."""
        finished: set[str] = set()
        width = len(active)
        for position, (oid, tag, value) in enumerate(
            zip(response.oids, response.tags, response.values, strict=True)
        ):
            col = active[position % width]
            if col in finished:
                continue
            prefix = prefixes[col]
            # A byte prefix ending on a sub-identifier boundary is an OID prefix (wire.py).
            if tag == END_OF_MIB_VIEW or not oid.startswith(prefix):
                finished.add(col)
                continue
            index = sub_ids(oid[len(prefix):])
            table = results[col]
            # Compared as decoded indexes: byte order is not OID order (see wire.py).
            if (table and index <= next(reversed(table))) or not index:
                raise SnmpError(
                    PollErrorKind.PROTOCOL,
                    f"{self.where} returned OIDs out of order while reading {what}",
                )
            last[col] = oid
            if type(value) is bytes:
                value = _plain(tag, value, octets)
            table[index] = value
        return [col for col in active if col not in finished]
