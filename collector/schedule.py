"""The poll schedule: one APScheduler interval job per device, with back-off and clean stop.

APScheduler 3.11's AsyncIOScheduler runs each job as a task on the running loop. Its
``max_instances=1`` keeps a slow device from overlapping itself; ``coalesce`` folds
missed runs into one. Its ``shutdown()`` cancels in-flight coroutine jobs even with
``wait=True``, so :meth:`PollScheduler.shutdown` pauses first, waits for our own
in-flight polls with a timeout, and only then shuts the scheduler down.

Failing devices back off: after n consecutive failures a device is skipped until
``interval * factor**n`` (capped) has passed since its last poll started. Times used for
that come from the injected clock, the same one passed to ``source.poll(now)``.
"""

from __future__ import annotations

import asyncio
import inspect
import logging
import random
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from apscheduler.schedulers.asyncio import AsyncIOScheduler
from apscheduler.triggers.interval import IntervalTrigger

from lightwarden.collector.readings import PollErrorKind, PollOutcome
from lightwarden.collector.source import PollSource

log = logging.getLogger(__name__)

# A returned awaitable is awaited; any other result (a handler may return what it made
# of the outcome for its own callers) is ignored.
OutcomeCallback = Callable[[PollOutcome], object]

_JOB_PREFIX = "poll:"


@dataclass(slots=True)
class DeviceSchedule:
    """Per-device schedule state (readable by status pages and tests)."""

    source: PollSource
    interval_s: float
    jitter_s: float
    consecutive_failures: int = 0
    next_allowed: float = 0.0  # clock time before which polls are skipped (back-off)
    last_started: float | None = None
    last_outcome: PollOutcome | None = None
    polls: int = 0
    skipped: int = 0


class PollScheduler:
    """Runs ``source.poll(clock())`` for every device on its own interval.

    ``on_outcome`` receives every PollOutcome (sync or async callable); its exceptions
    are logged, never propagated. Call :meth:`start` from inside a running event loop
    and ``await shutdown()`` before the loop ends.
    """

    def __init__(
        self,
        sources: Iterable[PollSource] = (),
        *,
        interval_s: float = 60.0,
        jitter_s: float = 0.0,
        on_outcome: OutcomeCallback | None = None,
        clock: Callable[[], float] = time.time,
        backoff_factor: float = 2.0,
        backoff_cap_s: float = 900.0,
        misfire_grace_s: float | None = None,
        start_spread_s: float | None = None,
        max_in_flight: int | None = None,
    ) -> None:
        if interval_s <= 0:
            raise ValueError(f"poll interval must be positive, got {interval_s}")
        if backoff_factor < 1:
            raise ValueError(f"back-off factor must be at least 1, got {backoff_factor}")
        self.interval_s = interval_s
        self.jitter_s = jitter_s
        self.on_outcome = on_outcome
        self.clock = clock
        self.backoff_factor = backoff_factor
        self.backoff_cap_s = backoff_cap_s
        self.misfire_grace_s = misfire_grace_s
        # Where the first poll of each device lands: spread over this many seconds (default
        # the device's whole interval, so a fleet's first cycle does not arrive at once).
        self.start_spread_s = start_spread_s
        if max_in_flight is not None and max_in_flight < 1:
            raise ValueError(f"max polls in flight must be at least 1, got {max_in_flight}")
        # Polls beyond the cap wait for a slot instead of crowding sockets and the CPU.
        self.max_in_flight = max_in_flight
        self._slots = asyncio.Semaphore(max_in_flight) if max_in_flight else None
        self.devices: dict[str, DeviceSchedule] = {}
        self._inflight: set[asyncio.Task[object]] = set()
        self._scheduler = AsyncIOScheduler(timezone=UTC)
        self._stopping = False
        for source in sources:
            self.add_source(source)

    # --- configuration -------------------------------------------------------------

    def add_source(
        self, source: PollSource, interval_s: float | None = None, jitter_s: float | None = None
    ) -> None:
        """Add (or replace) a device; works before and after start()."""
        name = source.name
        interval = interval_s if interval_s is not None else self.interval_s
        jitter = jitter_s if jitter_s is not None else self.jitter_s
        if interval <= 0:
            raise ValueError(f"{name}: poll interval must be positive, got {interval}")
        self.remove_source(name)
        self.devices[name] = DeviceSchedule(source, interval, jitter)
        if self._scheduler.running:
            self._add_job(name)

    def remove_source(self, name: str) -> None:
        self.devices.pop(name, None)
        job = self._scheduler.get_job(_JOB_PREFIX + name)
        if job is not None:
            job.remove()

    def _add_job(self, name: str) -> None:
        device = self.devices[name]
        spread = self.start_spread_s
        if spread is None:
            spread = device.interval_s
        # A loop busy for a moment must not drop a device's poll outright (default 1 s).
        grace = self.misfire_grace_s if self.misfire_grace_s is not None else device.interval_s
        grace = max(2, int(grace))
        first = datetime.now(UTC) + timedelta(seconds=random.uniform(0, spread))
        self._scheduler.add_job(
            self.poll_device,
            IntervalTrigger(seconds=device.interval_s, jitter=device.jitter_s or None),
            args=(name,),
            id=_JOB_PREFIX + name,
            name=f"poll {name}",
            replace_existing=True,
            max_instances=1,
            coalesce=True,
            misfire_grace_time=grace,
            next_run_time=first,
        )

    # --- running -------------------------------------------------------------------

    def start(self) -> None:
        """Start polling; must be called with an asyncio loop running."""
        for name in self.devices:
            self._add_job(name)
        self._scheduler.start()

    def in_flight(self) -> int:
        """Polls started and not yet handed on."""
        return sum(1 for t in self._inflight if not t.done())

    @property
    def running(self) -> bool:
        return self._scheduler.running and not self._stopping

    def backoff_delay(self, device: DeviceSchedule) -> float:
        """Seconds from a failed poll's start to the next allowed poll."""
        stretched = device.interval_s * self.backoff_factor ** device.consecutive_failures
        return min(self.backoff_cap_s, stretched)

    async def poll_device(self, name: str) -> PollOutcome | None:
        """One scheduled run: poll the device unless it is backing off. Returns the outcome."""
        device = self.devices.get(name)
        if device is None or self._stopping:
            return None
        now = self.clock()
        if now < device.next_allowed:
            device.skipped += 1
            return None
        task = asyncio.current_task()
        if task is not None:
            self._inflight.add(task)
        try:
            if self._slots is not None:
                async with self._slots:
                    if self._stopping:
                        return None  # shutting down while this poll waited for a slot
                    now = self.clock()  # the poll starts when it gets its slot
                    device.last_started = now
                    outcome = await self._run_poll(device, now)
            else:
                device.last_started = now
                outcome = await self._run_poll(device, now)
            device.polls += 1
            device.last_outcome = outcome
            if outcome.ok:
                device.consecutive_failures = 0
                device.next_allowed = 0.0
            else:
                device.consecutive_failures += 1
                # Half an interval of slack so jitter cannot push a due poll one more round.
                delay = self.backoff_delay(device) - 0.5 * device.interval_s
                device.next_allowed = now + max(0.0, delay)
                log.info(
                    "%s: poll failed (%s), %d in a row, next attempt in %.0f s",
                    name,
                    outcome.error_kind or "error",
                    device.consecutive_failures,
                    self.backoff_delay(device),
                )
            await self._deliver(outcome)
            return outcome
        finally:
            if task is not None:
                self._inflight.discard(task)

    async def _run_poll(self, device: DeviceSchedule, now: float) -> PollOutcome:
        name = device.source.name
        try:
            return await device.source.poll(now)
        except asyncio.CancelledError:
            raise
        except Exception as exc:
            # Sources should not raise; if one does, it becomes a failed outcome, not a crash.
            log.debug("%s: source raised", name, exc_info=True)
            return PollOutcome(
                device=name,
                started_at=now,
                duration_s=0.0,
                error=f"{name}: poll failed unexpectedly ({type(exc).__name__})",
                error_kind=PollErrorKind.INTERNAL,
            )

    async def _deliver(self, outcome: PollOutcome) -> None:
        if self.on_outcome is None:
            return
        try:
            result = self.on_outcome(outcome)
            if inspect.isawaitable(result):
                await result
        except Exception:
            log.exception("%s: outcome handler failed", outcome.device)

    async def shutdown(self, timeout_s: float = 30.0) -> int:
        """Stop scheduling, let in-flight polls finish (up to timeout_s), then stop.

        Returns how many polls were still running at the timeout and got cancelled.
        """
        if not self._scheduler.running:
            return 0
        self._stopping = True
        self._scheduler.pause()
        pending = {task for task in self._inflight if not task.done()}
        if pending:
            _, pending = await asyncio.wait(pending, timeout=timeout_s)
        for task in pending:
            log.warning("poll still running after %.0f s at shutdown; cancelling it", timeout_s)
            task.cancel()
        self._scheduler.shutdown(wait=False)
        return len(pending)
