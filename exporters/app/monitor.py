"""The poll pipeline: one poll outcome in, judged (rules), recorded (history), exported
(metrics) and alerted (lifecycle -> sink). Its parts are built by ``wiring`` and passed in;
nothing here reads the site config.

Whether the outcome came from the schedule (`run`, `demo`) or from one sweep (`check`),
it is handled the same way.
"""

from __future__ import annotations

import asyncio
import logging
import math
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from lightwarden.collector.entry import SharedParts
from lightwarden.collector.readings import OpticIdentity, PollOutcome, Quantity
from lightwarden.collector.source import PollSource
from lightwarden.exporters.pages.view import DeviceView
from lightwarden.exporters.prometheus.drift_metrics import DriftGauges
from lightwarden.exporters.prometheus.exposition import Exposition
from lightwarden.exporters.prometheus.self_metrics import SelfMetrics
from lightwarden.exporters.store.gather import history_advice_context, lane_outlooks
from lightwarden.exporters.store.history import History, HistoryError
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets, assess
from lightwarden.rules.catalogue import Catalogue
from lightwarden.rules.findings import SEVERITY_OF, AlertEvent, Assessment, Severity, WindowSource
from lightwarden.rules.hysteresis import ConditionTracker
from lightwarden.rules.lifecycle import AlertLifecycle
from lightwarden.rules.outlook import RxWindow
from lightwarden.rules.plant import Plant
from lightwarden.rules.spanloss import LinkIssue, check_link
from lightwarden.rules.windows import WindowResolver

log = logging.getLogger("lightwarden.monitor")

_AGEING = (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS)
#: how often (poll time) the drift gauges are recomputed from history, over how many days
DRIFT_EVERY_S = 3600.0
DRIFT_DAYS = 90.0
#: devices first recorded since the last refresh bring the next one forward to this long
#: after it (the first round of polls at start-up, a device added by a reload)
DRIFT_SETTLE_S = 30.0
AlertSink = Callable[[list[AlertEvent]], None]


def _edge(x: float) -> float | None:
    return None if np.isnan(x) else float(x)


@dataclass(slots=True)
class MonitorParts:
    """The long-lived parts one site config makes (exporters/app/wiring.py)."""

    site: str
    catalogue: Catalogue
    resolver: WindowResolver
    targets: MarginTargets
    tracker: ConditionTracker
    lifecycle: AlertLifecycle
    exposition: Exposition
    plant: Plant
    plant_with: Callable[[dict[tuple[str, str], str]], Plant]
    make_sources: Callable[[], list[PollSource]]
    make_history: Callable[[], History | None]
    shared: SharedParts


class Monitor:
    """Everything between the sources and the outside world, minus the HTTP socket."""

    def __init__(self, parts: MonitorParts, *, clock: Callable[[], float] = time.time,
                 alerts: bool = True, alert_sink: AlertSink | None = None,
                 self_metrics: SelfMetrics | None = None) -> None:
        self.parts = parts
        self.self_metrics = self_metrics
        self.clock = clock
        self.lifecycle = parts.lifecycle
        self.exposition = parts.exposition
        self.plant = parts.plant
        self.history: History | None = None
        self.sources: list[PollSource] = []
        self.alert_sink = alert_sink
        self._views: dict[str, DeviceView] = {}
        self._alerts_enabled = alerts
        self.exposition.set_alert_source(self.lifecycle.open_alerts)
        self.drift = DriftGauges()
        self.exposition.set_extra_source(self.drift.text)
        self._next_drift = -math.inf
        self._last_drift = -math.inf
        self._drift_devices: set[str] = set()
        self._drift_stale = False
        self._contexts: dict[tuple[str, str, int, Quantity], tuple[float, AdviceContext]] = {}
        self._drift_busy = threading.Lock()

    # -- the read-only view the pages take (pages.view.MonitorView) -------------------
    @property
    def site(self) -> str:
        return self.parts.site

    @property
    def targets(self) -> MarginTargets:
        return self.parts.targets

    @property
    def catalogue(self) -> Catalogue:
        return self.parts.catalogue

    @property
    def views(self) -> dict[str, DeviceView]:
        return self._views

    def open_alerts(self) -> list[AlertEvent]:
        return self.lifecycle.open_alerts()

    def plant_with_history(self) -> Plant:
        """The plant, with span wavelengths taken from the PMDs the history has seen."""
        if self.history is None:
            return self.plant
        pmd_of = {(w.device, w.port): w.pmd for w in self.history.rx_windows()}
        return self.parts.plant_with(pmd_of)

    def link_issues(self) -> list[LinkIssue]:
        """Spans in the plant record whose two ends do not belong together (wrong PMD,
        wavelength, or BiDi pairing), from the latest identity of each end."""
        optics: dict[tuple[str, str], OpticIdentity] = {}
        for view in self._views.values():
            if view.outcome.batch is not None:
                for o in view.outcome.batch.optics:
                    optics[(o.device, o.port)] = o
        issues: list[LinkIssue] = []
        for sp in self.plant.spans:
            a = optics.get((sp.a_device, sp.a_port))
            b = optics.get((sp.b_device, sp.b_port))
            if a is not None and b is not None:
                issues.extend(check_link(a, b))
        return issues

    # -- setup and teardown -----------------------------------------------------------
    def build_sources(self) -> list[PollSource]:
        """Make one source per device. Reads secrets; errors name device and reference."""
        self.sources = self.parts.make_sources()
        return self.sources

    def open_history(self) -> History | None:
        """Start keeping reading history (for trends, advice and the planners' report)."""
        self.history = self.parts.make_history()
        return self.history

    def close(self) -> None:
        with self._drift_busy:  # let a drift refresh in flight finish first
            if self.history is not None:
                self.history.close()
                self.history = None
        for s in self.sources:
            s.close()
        self.parts.shared.close()

    # -- handling outcomes ----------------------------------------------------------
    def handle(self, outcome: PollOutcome) -> DeviceView:
        """Judge one poll, update metrics and alerts. Never raises for device trouble."""
        now = outcome.started_at + outcome.duration_s
        if self.self_metrics is not None:
            self.self_metrics.observe_poll(outcome.duration_s, outcome.ok)
        assessment = None
        events: list[AlertEvent] = []
        if outcome.batch is not None:
            assessment = assess(outcome.batch, targets=self.targets, tracker=self.parts.tracker,
                                now=now, resolver=self.parts.resolver)
            if self.history is not None:
                self._record(assessment)
            if self._alerts_enabled:
                events = self.lifecycle.observe(assessment, now, self._context(assessment, now))
        elif self._alerts_enabled:
            events = self.lifecycle.mark_stale(outcome.device, now)
        self.exposition.update(outcome, assessment)
        view = self._views[outcome.device] = DeviceView(outcome, assessment)
        if events and self.alert_sink is not None:
            self.alert_sink(events)
        return view

    def _record(self, a: Assessment) -> None:
        assert self.history is not None
        b = a.batch
        rx = np.flatnonzero(b.quantity == int(Quantity.RX_POWER))
        windows = [
            RxWindow(b.device, b.optics[int(b.optic[i])].port, int(b.lane[i]),
                     b.optics[int(b.optic[i])].pmd, _edge(a.low_edge[i]), _edge(a.high_edge[i]),
                     WindowSource(int(a.window_source[i])).word, b.taken_at)
            for i in rx
        ]
        try:
            self.history.record(b, windows)
        except HistoryError as exc:
            log.error("%s", exc)  # monitoring goes on; the history has a gap
        now = b.taken_at
        if b.device not in self._drift_devices:  # a device the gauges have not seen yet
            self._drift_devices.add(b.device)
            self._drift_stale = True
        due = now >= self._next_drift or (
            self._drift_stale and now - self._last_drift >= DRIFT_SETTLE_S)
        if due and not self._drift_busy.locked():
            # off the poll path: at 10^5 lanes a refresh reads and fits every lane
            self._next_drift = now + DRIFT_EVERY_S
            self._last_drift = now
            self._drift_stale = False
            threading.Thread(target=self.refresh_drift, args=(now,), name="drift",
                             daemon=True).start()

    def refresh_drift(self, now: float) -> None:
        """Recompute the drift and run-out gauges from history (see prometheus/drift_metrics)."""
        with self._drift_busy:
            history = self.history
            if history is None:
                return
            try:
                lanes = lane_outlooks(history, self.plant_with_history(), self.targets, now,
                                      days=DRIFT_DAYS, with_lasers=False)
            except HistoryError as exc:
                log.error("drift gauges not refreshed: %s", exc)
                return
            self.drift.update(lanes, now)

    def _context(self, a: Assessment, now: float) -> dict[tuple[str, int, Quantity],
                                                           AdviceContext]:
        """History facts for the rows that may alert (few per poll), none for the rest."""
        if self.history is None:
            return {}
        out: dict[tuple[str, int, Quantity], AdviceContext] = {}
        b = a.batch
        for i in np.flatnonzero(SEVERITY_OF[a.condition.astype(np.int64)] >= Severity.WARNING):
            q = Quantity(int(b.quantity[i]))
            if q not in _AGEING:
                continue
            port, lane = b.optics[int(b.optic[i])].port, int(b.lane[i])
            key = (b.device, port, lane, q)
            held = self._contexts.get(key)
            # history gains at most one sample per sample interval: until then the facts
            # are the same, and an alerting row is asked for them on every poll
            if held is None or now - held[0] >= self.history.every_s:
                held = (now, history_advice_context(self.history, self.plant, b.device,
                                                    port, lane, q, now))
                self._contexts[key] = held
            out[(port, lane, q)] = held[1]
        return out

    async def poll_all(self) -> list[DeviceView]:
        """Poll every device once, concurrently; used by `check`."""
        if not self.sources:
            self.build_sources()
        now = self.clock()
        outcomes = await asyncio.gather(*(s.poll(now) for s in self.sources))
        return [self.handle(o) for o in outcomes]
