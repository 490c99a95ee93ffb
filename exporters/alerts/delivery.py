"""The alert dispatcher: lifecycle events in, outbox, one worker thread per destination out.

``submit`` writes events to the outbox (durable) and wakes the workers; each worker drains
its own destination's queue oldest first, retries with back-off while a receiver is down,
and deletes an event only once the receiver accepted it. After a restart a new Dispatcher
on the same outbox simply carries on. Alertmanager workers also re-send every open alert
each resend interval so Alertmanager never times them out while we are alive.

Threads rather than asyncio: delivery is a handful of blocking POSTs, the service's event
loop belongs to polling, and a slow receiver must not be able to stall a poll.
"""

from __future__ import annotations

import dataclasses
import logging
import random
import threading
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from typing import Protocol

from lightwarden.exporters.alerts.alertmanager import DEFAULT_RESEND_INTERVAL_S, AlertmanagerSender
from lightwarden.exporters.alerts.http import AlertDestination, DeliveryError, RetryPolicy
from lightwarden.exporters.alerts.outbox import (
    Outbox,
    OutboxItem,
    check_event,
    event_from_dict,
    event_to_dict,
)
from lightwarden.exporters.alerts.webhook import WebhookSender
from lightwarden.rules.findings import AlertEvent, AlertKind

log = logging.getLogger(__name__)

OPEN_STATE_NAME = "delivery.open_alerts"
_OPEN_KINDS = frozenset({AlertKind.OPEN, AlertKind.UPDATE, AlertKind.STALE})


class Sender(Protocol):
    destination: AlertDestination
    batch_limit: int
    in_order_one_at_a_time: bool

    def send(self, events: Sequence[AlertEvent], now: float) -> None: ...


def make_sender(
    destination: AlertDestination, resend_interval_s: float = DEFAULT_RESEND_INTERVAL_S
) -> Sender:
    if destination.kind == "alertmanager":
        return AlertmanagerSender(destination, resend_interval_s)
    return WebhookSender(destination)


@dataclass(slots=True)
class DestinationStatus:
    """What the dispatcher knows about one destination (for metrics and the status page)."""

    name: str
    kind: str
    delivered: int = 0
    failures: int = 0  # failed attempts since start
    consecutive_failures: int = 0
    dead_lettered: int = 0
    last_error: str = ""  # already free of credentials
    last_success_at: float | None = None


@dataclass(slots=True)
class _Worker:
    sender: Sender
    status: DestinationStatus
    wake: threading.Event = field(default_factory=threading.Event)
    thread: threading.Thread | None = None
    next_resend_at: float = 0.0


class Dispatcher:
    """Moves AlertEvents to every configured destination, durably and in order."""

    def __init__(
        self,
        outbox: Outbox,
        destinations: Sequence[AlertDestination],
        clock: Callable[[], float] = time.time,
        *,
        resend_interval_s: float = DEFAULT_RESEND_INTERVAL_S,
        retry: RetryPolicy | None = None,
        rng: random.Random | None = None,
        idle_poll_s: float = 5.0,
    ) -> None:
        names = [d.name for d in destinations]
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise ValueError(f"alert destinations share a name: {dupes}; give each a unique name")
        self._outbox = outbox
        self._clock = clock
        self._resend_interval_s = resend_interval_s
        self._retry = retry or RetryPolicy()
        self._rng = rng or random.Random()
        self._idle_poll_s = idle_poll_s
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._drain_deadline: float | None = None  # monotonic
        self._workers = [
            _Worker(make_sender(d, resend_interval_s), DestinationStatus(d.name, d.kind))
            for d in destinations
        ]
        self._open: dict[str, AlertEvent] = self._load_open()

    # -- API for the service ---------------------------------------------------------

    def submit(self, events: Iterable[AlertEvent]) -> int:
        """Queue events for every destination; returns how many outbox rows were new.

        Raises ValueError (naming the event) for a malformed event; nothing of that call
        is queued then. Safe to call from any thread.
        """
        batch = list(events)
        for ev in batch:
            check_event(ev)
        if not batch:
            return 0
        every = [w.sender.destination.name for w in self._workers]
        am = [
            w.sender.destination.name
            for w in self._workers
            if w.sender.destination.kind == "alertmanager"
        ]
        with self._lock:
            # Outbox write and open-set change happen together so a worker's snapshot of
            # open alerts is never ahead of or behind what the outbox will deliver.
            opened = dict(self._open)
            routed: list[tuple[AlertEvent, list[str]]] = []
            for ev in batch:
                retired = _apply_open(opened, ev)
                if retired is not None and am:
                    routed.append((retired, am))
                routed.append((ev, every))
            added = self._outbox.put_routed(routed)
            if opened != self._open:
                self._open = opened
                self._outbox.save_state(
                    OPEN_STATE_NAME, {k: event_to_dict(e) for k, e in opened.items()}
                )
        for w in self._workers:
            w.wake.set()
        return added

    def open_alerts(self) -> list[AlertEvent]:
        """The newest step of every alert not yet resolved, ordered by key."""
        with self._lock:
            return [self._open[k] for k in sorted(self._open)]

    def status(self) -> list[DestinationStatus]:
        """Per-destination counters (copies, safe to read while workers run)."""
        return [dataclasses.replace(w.status) for w in self._workers]

    def backlog(self) -> dict[str, int]:
        """Queued events per destination name."""
        return self._outbox.backlog()

    def start(self) -> None:
        """Start one worker thread per destination (idempotent)."""
        self._stop.clear()
        self._drain_deadline = None
        for w in self._workers:
            if w.thread is not None and w.thread.is_alive():
                continue
            w.thread = threading.Thread(
                target=self._run, args=(w,), name=f"alerts-{w.status.kind}", daemon=True
            )
            w.thread.start()

    def stop(self, drain_timeout: float = 5.0) -> bool:
        """Stop workers, first trying for up to ``drain_timeout`` s to empty the queues.

        Returns True when nothing is left queued. Whatever is left stays in the outbox
        for the next start.
        """
        self._drain_deadline = time.monotonic() + max(0.0, drain_timeout)
        self._stop.set()
        for w in self._workers:
            w.wake.set()
        for w in self._workers:
            if w.thread is not None:
                # A POST in flight may outlast the deadline by at most its own timeout.
                w.thread.join(max(0.0, drain_timeout) + w.sender.destination.timeout_s + 1.0)
                if not w.thread.is_alive():
                    w.thread = None
        names = {w.sender.destination.name for w in self._workers}
        return not any(n in names and c for n, c in self._outbox.backlog().items())

    # -- worker ----------------------------------------------------------------------

    def _run(self, w: _Worker) -> None:
        name = w.sender.destination.name
        while True:
            w.wake.clear()
            if self._stop.is_set() and self._past_deadline():
                return
            try:
                items = self._outbox.pending(name, w.sender.batch_limit)
            except Exception as exc:  # keep the worker alive; the outbox may recover
                log.error("alert outbox read failed for %s: %s", name, exc)
                self._pause(w, self._retry.cap_s)
                continue
            if items:
                if not self._deliver(w, items):
                    self._pause(w, self._retry.delay(w.status.consecutive_failures, self._rng))
                continue
            if self._stop.is_set():
                return  # drained
            wait = self._idle_poll_s
            if isinstance(w.sender, AlertmanagerSender):
                now = self._clock()
                if now >= w.next_resend_at:
                    w.next_resend_at = now + self._resend(w)
                wait = min(wait, max(0.0, w.next_resend_at - self._clock()))
            w.wake.wait(wait)

    def _deliver(self, w: _Worker, items: list[OutboxItem]) -> bool:
        """Send one batch; True when the worker may go straight on to the next one."""
        try:
            w.sender.send([it.event for it in items], self._clock())
        except DeliveryError as exc:
            if exc.retryable:
                self._failed(w, items, str(exc))
                return False
            if len(items) > 1:
                # Find the one the receiver objects to: send singly, bury only that one.
                return all(self._deliver(w, [it]) for it in items)
            log.error(
                "alert %s:%s rejected by %s, kept in dead letters: %s",
                items[0].event.key,
                items[0].event.sequence,
                w.status.name,
                exc,
            )
            self._outbox.bury([items[0].id], str(exc))
            w.status.dead_lettered += 1
            w.status.last_error = str(exc)
            return True
        self._outbox.ack([it.id for it in items])
        if w.status.consecutive_failures:
            log.info("alert destination %s accepting again", w.status.name)
        w.status.delivered += len(items)
        w.status.consecutive_failures = 0
        w.status.last_success_at = self._clock()
        return True

    def _resend(self, w: _Worker) -> float:
        """Re-send every open alert; returns seconds until the next resend."""
        with self._lock:
            snapshot = list(self._open.values())
        if not snapshot:
            return self._resend_interval_s
        try:
            w.sender.send(snapshot, self._clock())
        except DeliveryError as exc:
            self._failed(w, [], str(exc))
            return min(
                self._resend_interval_s,
                self._retry.delay(w.status.consecutive_failures, self._rng),
            )
        w.status.consecutive_failures = 0
        w.status.last_success_at = self._clock()
        return self._resend_interval_s

    def _failed(self, w: _Worker, items: list[OutboxItem], error: str) -> None:
        if w.status.consecutive_failures == 0:
            log.warning("alert destination %s failing, will retry: %s", w.status.name, error)
        else:
            log.debug("alert destination %s still failing: %s", w.status.name, error)
        w.status.failures += 1
        w.status.consecutive_failures += 1
        w.status.last_error = error
        if items:
            self._outbox.record_failure([it.id for it in items], error)

    def _pause(self, w: _Worker, seconds: float) -> None:
        """Back-off wait; during a stop it never runs past the drain deadline.

        Submissions must not cut a back-off short (that would hammer a receiver that is
        down), so this waits on the stop flag, not on the worker's wake event.
        """
        end = time.monotonic() + seconds
        while True:
            if self._drain_deadline is not None:
                end = min(end, self._drain_deadline)
            left = end - time.monotonic()
            if left <= 0:
                return
            if self._stop.is_set():
                time.sleep(left)
                return
            self._stop.wait(left)

    def _past_deadline(self) -> bool:
        return self._drain_deadline is not None and time.monotonic() >= self._drain_deadline

    # -- open-alert state ------------------------------------------------------------

    def _load_open(self) -> dict[str, AlertEvent]:
        state = self._outbox.load_state(OPEN_STATE_NAME) or {}
        out = {}
        for key, data in state.items():
            try:
                out[key] = event_from_dict(data)
            except Exception as exc:
                log.error("ignoring unreadable open alert %r in outbox state: %s", key, exc)
        return out


def _apply_open(opened: dict[str, AlertEvent], ev: AlertEvent) -> AlertEvent | None:
    """Apply ``ev`` to the open set; return a resolve for the label set it replaces, if any.

    The lifecycle keeps one key per (device, port, lane, quantity) while the condition, and
    so the alertname and severity, may change (near overload -> overloaded). Alertmanager
    identifies alerts by labels, so the old label set must be resolved explicitly or it
    would linger until its endsAt.
    """
    cur = opened.get(ev.key)
    if cur is not None and ev.sequence < cur.sequence:
        return None  # a late, older step must not roll the alert back
    if ev.kind not in _OPEN_KINDS:
        opened.pop(ev.key, None)
        return None
    opened[ev.key] = ev
    if cur is None or (cur.alertname, cur.severity) == (ev.alertname, ev.severity):
        return None
    return dataclasses.replace(
        cur,
        kind=AlertKind.RESOLVE,
        key=f"{ev.key}#retired:{cur.alertname}:{cur.severity.value}",
        sequence=ev.sequence,
        ends_at=ev.at,
        at=ev.at,
        summary=f"Superseded by {ev.alertname}: {ev.summary}",
        advice="",
        caution="",
    )
