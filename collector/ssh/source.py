"""Poll one device's optics over SSH: netmiko on a dedicated thread pool, a platform as data.

netmiko is synchronous, so every session runs on :class:`SshWorkers`, a thread pool of
our own (never the event loop's default executor, which an in-process SSH server or other
sources may need). A per-device semaphore bounds how many sessions one device gets.
Sessions stay open between polls; a session found dead is reopened once.

Host keys are checked strictly by default against a known_hosts file: a changed key
fails the poll as ``hostkey`` ("host key mismatch"). Secrets never appear in messages.
Every failure comes back as a :class:`PollOutcome` with an ``error_kind``:
``auth``, ``hostkey``, ``timeout``, ``dropped``, ``refused``, ``parse`` (a partial batch is
still returned), ``config`` (unusable local settings) or ``internal``.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import socket
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TypeVar

import paramiko
from netmiko.base_connection import BaseConnection
from netmiko.exceptions import (
    NetmikoAuthenticationException,
    NetmikoTimeoutException,
    ReadException,
    ReadTimeout,
)
from netmiko.no_config import NoConfig
from netmiko.no_enable import NoEnable

from lightwarden.collector.eeprom.hexdump import HexDumpError, parse_hexdump
from lightwarden.collector.map_facts import (
    MapFacts,
    apply_map_facts,
    facts_from_map,
    stale_maps,
)
from lightwarden.collector.readings import PollErrorKind, PollOutcome, ReadingBatch
from lightwarden.collector.ssh.cli_parse import parse_outputs
from lightwarden.collector.ssh.platforms.platform import Platform

T = TypeVar("T")


@dataclass(slots=True, frozen=True)
class SshCredentials:
    """Login for one device: a password, a private key file, or both. Secrets stay out of repr."""

    username: str
    password: str = field(default="", repr=False)
    key_file: str | None = None
    key_passphrase: str = field(default="", repr=False)


class SshWorkers:
    """The thread pool every SSH source runs netmiko on. Share one per process."""

    def __init__(self, max_workers: int = 16, thread_name_prefix: str = "lw-ssh") -> None:
        if max_workers < 1:
            raise ValueError("max_workers must be at least 1")
        self.max_workers = max_workers
        self.executor = ThreadPoolExecutor(max_workers, thread_name_prefix=thread_name_prefix)

    async def run(self, fn: Callable[..., T], *args: Any) -> T:
        return await asyncio.get_running_loop().run_in_executor(self.executor, fn, *args)

    def shutdown(self, wait: bool = True) -> None:
        self.executor.shutdown(wait=wait, cancel_futures=True)

    def __enter__(self) -> SshWorkers:
        return self

    def __exit__(self, *exc: object) -> None:
        self.shutdown()


# -- the netmiko driver ----------------------------------------------------------------


@dataclass(slots=True)
class MemoryMapOutcome:
    """One port's memory map (raw bytes in our binary layout), or why there is none."""

    port: str
    data: bytes | None = None
    error: str = ""
    error_kind: PollErrorKind = PollErrorKind.NONE


class SessionDropped(ConnectionError):
    """The SSH channel closed while we were waiting for output."""


class PlatformDriver(NoEnable, NoConfig, BaseConnection):
    """A netmiko driver built from a platform definition (no enable, no config mode).

    Session preparation reads up to the definition's anchored prompt, takes the base
    prompt from it, then runs the paging-off and width commands, each read up to the
    prompt again.
    """

    def __init__(self, *, platform: Platform, prepare_timeout: float, **kwargs: Any) -> None:
        self.lw_platform = platform
        self.lw_prepare_timeout = prepare_timeout
        super().__init__(device_type=f"lightwarden_{platform.name}", auto_connect=False, **kwargs)

    def session_preparation(self) -> None:
        pattern = self.lw_platform.prompt
        output = self.read_until_pattern(pattern=pattern, read_timeout=self.lw_prepare_timeout)
        last = output.rstrip("\n").rsplit("\n", 1)[-1]
        match = self.lw_platform.prompt_re.search(last)
        shown = (match.group(0) if match else last).strip()
        # netmiko strips a trailing prompt by looking for the base prompt in the last line.
        self.base_prompt = shown.rstrip(">#$%").strip() or shown
        session = self.lw_platform.session
        for command in (*session.paging_off, *session.width):
            self.send_command(command, expect_string=pattern, read_timeout=self.lw_prepare_timeout)

    def set_base_prompt(self, *args: Any, **kwargs: Any) -> str:
        return self.base_prompt

    def read_channel(self) -> str:
        data = super().read_channel()
        if not data:
            chan = self.remote_conn
            if isinstance(chan, paramiko.Channel):
                transport = chan.get_transport()
                if chan.closed or chan.eof_received or transport is None or not (
                    transport.is_active()
                ):
                    raise SessionDropped("the session closed while output was awaited")
        return data

    def is_alive(self) -> bool:
        chan = self.remote_conn
        if not isinstance(chan, paramiko.Channel) or chan.closed or chan.eof_received:
            return False
        transport = chan.get_transport()
        if transport is None or not transport.is_active():
            return False
        return super().is_alive()

    def cleanup(self, command: str = "exit") -> None:
        with contextlib.suppress(Exception):
            self.write_channel(command + self.RETURN)


# -- the source ------------------------------------------------------------------------


class PollFailure(Exception):
    """A classified device-level failure; ``str()`` is the message for the outcome."""

    def __init__(self, kind: PollErrorKind, message: str) -> None:
        super().__init__(message)
        self.kind = kind


def _chain(exc: BaseException) -> list[BaseException]:
    seen: list[BaseException] = []
    cur: BaseException | None = exc
    while cur is not None and cur not in seen:
        seen.append(cur)
        cur = cur.__cause__ or cur.__context__
    return seen


def _refused(exc: BaseException) -> bool:
    for e in _chain(exc):
        if isinstance(e, ConnectionRefusedError):
            return True
        if isinstance(e, paramiko.ssh_exception.NoValidConnectionsError) and any(
            isinstance(v, ConnectionRefusedError)
            or getattr(v, "errno", None) == errno.ECONNREFUSED
            for v in e.errors.values()
        ):
            return True
    return False


class SshSource:
    """One device polled over SSH with a platform definition. Matches the PollSource protocol.

    ``known_hosts`` is the OpenSSH known_hosts file to check host keys against (None:
    the user's own ~/.ssh/known_hosts). ``read_timeout`` is the limit per command
    (default: the platform's ``read_timeout_s``); ``connect_timeout`` covers TCP, banner
    and authentication. ``max_sessions`` bounds concurrent sessions to this device.

    ``read_maps``: also read each module's memory map with the platform's eeprom command,
    once per module (port and serial): on the first poll for every fitted module, later
    only for modules not seen before. The decoded thresholds and Rx power type (see
    :mod:`lightwarden.collector.map_facts`) are applied to every poll's batch. A map
    that cannot be read is noted on the optic and not asked for again while the same
    module stays in; a session failure while reading maps is retried on the next poll.
    """

    def __init__(
        self,
        name: str,
        host: str,
        platform: Platform,
        credentials: SshCredentials,
        workers: SshWorkers,
        *,
        port: int = 22,
        known_hosts: str | Path | None = None,
        strict_host_key: bool = True,
        connect_timeout: float = 10.0,
        read_timeout: float | None = None,
        max_sessions: int = 1,
        keep_open: bool = True,
        read_maps: bool = False,
    ) -> None:
        if max_sessions < 1:
            raise ValueError("max_sessions must be at least 1")
        self.name = name
        self.host = host
        self.port = port
        self.platform = platform
        self.workers = workers
        self.known_hosts = Path(known_hosts).expanduser() if known_hosts is not None else None
        self.strict_host_key = strict_host_key
        self.connect_timeout = connect_timeout
        self.read_timeout = read_timeout if read_timeout is not None else platform.read_timeout_s
        self.max_sessions = max_sessions
        self.keep_open = keep_open
        self._credentials = credentials
        self._idle: list[PlatformDriver] = []
        self._sem: tuple[asyncio.AbstractEventLoop, asyncio.Semaphore] | None = None
        self.read_maps = read_maps and platform.eeprom is not None
        #: (port, serial) -> facts from that module's map
        self._maps: dict[tuple[str, str], MapFacts] = {}
        self._map_read_at: dict[tuple[str, str], float] = {}
        self.map_reads = 0  # memory maps asked of the device so far

    def __repr__(self) -> str:
        return f"SshSource({self.name!r}, {self.host}:{self.port}, platform={self.platform.name!r})"

    @property
    def where(self) -> str:
        return f"{self.host}:{self.port}"

    def _semaphore(self) -> asyncio.Semaphore:
        loop = asyncio.get_running_loop()
        if self._sem is None or self._sem[0] is not loop:
            self._sem = (loop, asyncio.Semaphore(self.max_sessions))
        return self._sem[1]

    async def poll(self, now: float) -> PollOutcome:
        started = time.monotonic()
        async with self._semaphore():
            try:
                outputs = await self.workers.run(self._collect)
            except PollFailure as exc:
                return PollOutcome(self.name, now, time.monotonic() - started,
                                   error=str(exc), error_kind=exc.kind)
            except Exception as exc:
                return PollOutcome(
                    self.name, now, time.monotonic() - started,
                    error=f"{self.name}: unexpected {type(exc).__name__} while polling over SSH",
                    error_kind=PollErrorKind.INTERNAL,
                )
        result = parse_outputs(self.name, self.platform, outputs, now)
        if self.read_maps and result.batch is not None:
            await self._apply_maps(result.batch)
        outcome = PollOutcome(self.name, now, time.monotonic() - started, batch=result.batch)
        if result.problems:
            more = f" (and {len(result.problems) - 1} more)" if len(result.problems) > 1 else ""
            outcome.error = f"{self.name}: output not fully understood: {result.problems[0]}{more}"
            outcome.error_kind = PollErrorKind.PARSE
        return outcome

    async def _apply_maps(self, batch: ReadingBatch) -> None:
        keys = {o.port: (o.port, o.serial.strip()) for o in batch.optics}
        stale = set(stale_maps(self._maps, self._map_read_at, batch.taken_at, keys.values()))
        missing = [port for port, key in keys.items() if key in stale]
        if missing:
            assert self.platform.eeprom is not None
            commands = {port: self.platform.eeprom.command.format(port=port) for port in missing}
            try:
                async with self._semaphore():
                    texts = await self.workers.run(self._collect, list(commands.values()))
            except PollFailure:
                texts = None  # the readings stand; maps are tried again next poll
            if texts is not None:
                self.map_reads += len(missing)
                for port, command in commands.items():
                    self._maps[keys[port]] = self._facts(command, texts.get(command, ""))
                    self._map_read_at[keys[port]] = batch.taken_at
            for key in [k for k in self._maps if k not in keys.values()]:
                del self._maps[key]  # modules no longer fitted
                self._map_read_at.pop(key, None)
        apply_map_facts(batch, {port: self._maps[key] for port, key in keys.items()
                                if key in self._maps})

    def _facts(self, command: str, text: str) -> MapFacts:
        try:
            data = parse_hexdump(text)
        except HexDumpError as exc:
            first = text.strip().splitlines()[0] if text.strip() else "empty output"
            reason = first if self.platform.is_error_line(first) else str(exc)
            return MapFacts(notes=(f"memory map not read: {command!r}: {reason}",))
        return facts_from_map(data)

    async def read_memory_map(self, port: str) -> MemoryMapOutcome:
        """Fetch one port's module memory map with the platform's eeprom command."""
        if self.platform.eeprom is None:
            return MemoryMapOutcome(port, error=f"{self.name}: platform {self.platform.name!r} "
                                    "has no memory-map command",
                                    error_kind=PollErrorKind.UNSUPPORTED)
        command = self.platform.eeprom.command.format(port=port)
        async with self._semaphore():
            try:
                text = (await self.workers.run(self._collect, [command]))[command]
            except PollFailure as exc:
                return MemoryMapOutcome(port, error=str(exc), error_kind=exc.kind)
        try:
            return MemoryMapOutcome(port, data=parse_hexdump(text))
        except HexDumpError as exc:
            first = text.strip().splitlines()[0] if text.strip() else "empty output"
            reason = first if self.platform.is_error_line(first) else str(exc)
            return MemoryMapOutcome(port, error=f"{self.name}: {command!r}: {reason}",
                                    error_kind=PollErrorKind.PARSE)

    async def aclose(self) -> None:
        await self.workers.run(self.close)

    def close(self) -> None:
        """Close idle sessions (blocking; call from a worker thread or at shutdown)."""
        idle, self._idle = self._idle, []
        for conn in idle:
            conn.disconnect()

    # -- blocking part, on a worker thread ---------------------------------------------
    def _collect(self, commands: list[str] | None = None) -> dict[str, str]:
        commands = self.platform.commands() if commands is None else commands
        conn: PlatformDriver | None = None
        reused = False
        while self._idle:
            candidate = self._idle.pop()
            if candidate.is_alive():
                conn, reused = candidate, True
                break
            candidate.disconnect()  # dropped since the last poll: reconnect below
        if conn is None:
            conn = self._connect()
        try:
            outputs = self._run_commands(conn, commands)
        except PollFailure as exc:
            conn.disconnect()
            if not (reused and exc.kind is PollErrorKind.DROPPED):
                raise
            # A kept session died between polls without us noticing: reconnect once.
            conn = self._connect()
            try:
                outputs = self._run_commands(conn, commands)
            except PollFailure:
                conn.disconnect()
                raise
        if self.keep_open:
            self._idle.append(conn)
        else:
            conn.disconnect()
        return outputs

    def _connect(self) -> PlatformDriver:
        creds = self._credentials
        kwargs: dict[str, Any] = {
            "host": self.host,
            "port": self.port,
            "username": creds.username,
            "password": creds.password or None,
            "use_keys": False,
            "allow_agent": False,
            "ssh_strict": self.strict_host_key,
            "conn_timeout": self.connect_timeout,
            "auth_timeout": self.connect_timeout,
            "banner_timeout": self.connect_timeout,
            "blocking_timeout": max(self.read_timeout, 1.0),
            "fast_cli": True,
        }
        if self.strict_host_key:
            if self.known_hosts is None:
                kwargs["system_host_keys"] = True
            elif not self.known_hosts.is_file():
                raise PollFailure(
                    PollErrorKind.CONFIG,
                    f"{self.name}: known_hosts file {self.known_hosts} not found",
                )
            else:
                kwargs.update(system_host_keys=False, alt_host_keys=True,
                              alt_key_file=str(self.known_hosts))
        if creds.key_file:
            try:
                kwargs["pkey"] = paramiko.PKey.from_path(
                    creds.key_file, creds.key_passphrase or None
                )
            except (OSError, paramiko.SSHException, ValueError) as exc:
                reason = (
                    "needs a passphrase or the passphrase is wrong"
                    if isinstance(exc, paramiko.PasswordRequiredException | paramiko.SSHException)
                    else "cannot be read"
                )
                raise PollFailure(
                    PollErrorKind.CONFIG, f"{self.name}: SSH key file {creds.key_file} {reason}"
                ) from None
        try:
            conn = PlatformDriver(
                platform=self.platform, prepare_timeout=self.read_timeout, **kwargs
            )
        except Exception as exc:
            raise self._classify(exc, "connect") from None
        for step, run in (("connect", conn.establish_connection),
                          ("prepare", conn._try_session_preparation)):
            try:
                run()
            except Exception as exc:
                conn.disconnect()
                raise self._classify(exc, step) from None
        return conn

    def _run_commands(self, conn: PlatformDriver, commands: list[str]) -> dict[str, str]:
        outputs: dict[str, str] = {}
        for command in commands:
            try:
                text = conn.send_command(
                    command,
                    expect_string=self.platform.prompt,
                    read_timeout=self.read_timeout,
                    strip_prompt=True,
                    strip_command=True,
                )
            except Exception as exc:
                raise self._classify(exc, command, conn) from None
            outputs[command] = str(text)
        return outputs

    def _classify(
        self, exc: BaseException, step: str, conn: PlatformDriver | None = None
    ) -> PollFailure:
        """Turn any exception into a short, secret-free, device-named failure."""
        name, where = self.name, self.where
        chain = _chain(exc)
        if any(isinstance(e, NetmikoAuthenticationException | paramiko.AuthenticationException)
               for e in chain):
            return PollFailure(
                PollErrorKind.AUTH,
                f"{name}: authentication failed for user {self._credentials.username!r} "
                f"at {where}",
            )
        if any(isinstance(e, paramiko.BadHostKeyException) for e in chain) or (
            "does not match" in str(exc) and "Host key" in str(exc)
        ):
            return PollFailure(
                PollErrorKind.HOSTKEY,
                f"{name}: host key mismatch: {where} offered a key different from the one "
                f"in {self.known_hosts or 'known_hosts'}; refusing to log in",
            )
        if "not found in known_hosts" in str(exc):
            return PollFailure(
                PollErrorKind.HOSTKEY,
                f"{name}: host key unknown: {where} is not in "
                f"{self.known_hosts or 'known_hosts'}; add its key to trust it",
            )
        # ReadTimeout is a ReadException too: only other read failures mean a dead channel.
        if any(isinstance(e, SessionDropped | EOFError)
               or (isinstance(e, ReadException) and not isinstance(e, ReadTimeout))
               for e in chain) or (
            isinstance(exc, ReadTimeout) and conn is not None and not conn.is_alive()
        ):
            during = "while logging in" if step in ("connect", "prepare") else f"during {step!r}"
            return PollFailure(
                PollErrorKind.DROPPED, f"{name}: session to {where} dropped {during}"
            )
        if _refused(exc):
            return PollFailure(PollErrorKind.REFUSED, f"{name}: connection refused by {where}")
        if isinstance(exc, ReadTimeout):
            if step == "prepare":
                return PollFailure(
                    PollErrorKind.TIMEOUT,
                    f"{name}: no prompt matching {self.platform.prompt!r} from {where} "
                    f"within {self.read_timeout:g} s after login",
                )
            return PollFailure(
                PollErrorKind.TIMEOUT,
                f"{name}: {step!r} timed out: no prompt after {self.read_timeout:g} s",
            )
        if any(isinstance(e, socket.timeout | TimeoutError) for e in chain) or isinstance(
            exc, NetmikoTimeoutException
        ):
            return PollFailure(
                PollErrorKind.TIMEOUT,
                f"{name}: timed out connecting to {where} (limit {self.connect_timeout:g} s)",
            )
        if any(isinstance(e, OSError | paramiko.SSHException) for e in chain):
            return PollFailure(
                PollErrorKind.DROPPED, f"{name}: SSH session to {where} failed during {step}"
            )
        return PollFailure(
            PollErrorKind.INTERNAL,
            f"{name}: unexpected {type(exc).__name__} during {step} at {where}",
        )

