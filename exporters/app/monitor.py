"""The poll pipeline: one poll outcome in, judged (rules), recorded (history), exported
(metrics) and alerted (lifecycle -> sink). Its parts are built by ``wiring`` and passed in;
nothing here reads the site config.

Whether the outcome came from the schedule (`run`, `demo`) or from one sweep (`check`),
it is handled the same way.
"""

from __future__ import annotations

import asyncio
import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from lightwarden.collector.entry import SharedParts
from lightwarden.collector.readings import OpticIdentity, PollOutcome, Quantity
from lightwarden.collector.source import PollSource
from lightwarden.exporters.pages.view import DeviceView
from lightwarden.exporters.prometheus.exposition import Exposition
from lightwarden.exporters.prometheus.self_metrics import SelfMetrics
from lightwarden.exporters.store.gather import history_advice_context
from lightwarden.exporters.store.history import History, HistoryError
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets, assess
from lightwarden.rules.catalogue import Catalogue
from lightwarden.rules.findings import (
    SEVERITY_OF,
    AlertEvent,
    Assessment,
    Condition,
    Severity,
    WindowSource,
    alert_key,
)
from lightwarden.rules.hysteresis import ConditionTracker
from lightwarden.rules.lifecycle import AlertLifecycle
from lightwarden.rules.outlook import RxWindow
from lightwarden.rules.plant import Plant
from lightwarden.rules.plausibility import flag_implausible
from lightwarden.rules.spanloss import LinkIssue, check_link
from lightwarden.rules.windows import WindowResolver

log = logging.getLogger("lightwarden.monitor")

_AGEING = (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS)
#: Conditions of a far transmitter that explain a dark receiver.
_TX_CAUSES = (Condition.LASER_OFF, Condition.TX_FAULT, Condition.DARK)
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
    state_dir: Path  # where history, outbox and saved state live
    stale_after_s: float = 300.0  # a failed device's last readings leave the metrics then


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
        #: the devices of the running config (None until sources are built); outcomes of
        #: others (a poll in flight when a reload removed its device) are dropped
        self._active: set[str] | None = None
        self._alerts_enabled = alerts
        self.exposition.set_alert_source(self.lifecycle.open_alerts)

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
        self.set_sources(self.parts.make_sources())
        return self.sources

    def set_sources(self, sources: list[PollSource]) -> None:
        self.sources = sources
        self._active = {s.name for s in sources}

    def forget_device(self, device: str) -> None:
        """A device taken out of the config: its series end, its open alerts resolve."""
        self._views.pop(device, None)
        self.exposition.remove(device)
        if self._alerts_enabled:
            events = self.lifecycle.retire(device, self.clock())
            if events and self.alert_sink is not None:
                self.alert_sink(events)

    def open_history(self) -> History | None:
        """Start keeping reading history (for trends, advice and the planners' report)."""
        self.history = self.parts.make_history()
        return self.history

    def close(self) -> None:
        if self.history is not None:
            self.history.close()
            self.history = None
        for s in self.sources:
            s.close()
        self.parts.shared.close()

    # -- handling outcomes ----------------------------------------------------------
    def handle(self, outcome: PollOutcome) -> DeviceView:
        """Judge one poll, update metrics and alerts. Never raises for device trouble."""
        if self._active is not None and outcome.device not in self._active:
            return DeviceView(outcome, None)  # removed by a reload while it was polled
        now = outcome.started_at + outcome.duration_s
        if self.self_metrics is not None:
            self.self_metrics.observe_poll(outcome.duration_s, outcome.ok)
        assessment = None
        events: list[AlertEvent] = []
        if outcome.batch is not None:
            flag_implausible(outcome.batch)  # a broken sensor's value is never judged
            assessment = assess(outcome.batch, targets=self.targets, tracker=self.parts.tracker,
                                now=now, resolver=self.parts.resolver)
            far = self._far_ends(assessment)
            if self.history is not None:
                self._record(assessment)
            if self._alerts_enabled:
                context = self._context(assessment, now)
                for k, ctx in far.items():
                    context[k] = replace(context[k], far_device=ctx.far_device,
                                         far_port=ctx.far_port, far_tx_dbm=ctx.far_tx_dbm,
                                         far_tx_condition=ctx.far_tx_condition) \
                        if k in context else ctx
                events = self.lifecycle.observe(assessment, now, context)
        elif self._alerts_enabled:
            events = self.lifecycle.mark_stale(outcome.device, now)
        last_good = None
        prev = self._views.get(outcome.device)
        if assessment is None and prev is not None:
            last_good = prev.assessment or prev.last_good
        since = (prev.health_since if prev is not None and prev.health == outcome.health
                 else outcome.started_at)
        fresh_enough = (last_good is not None
                        and now - last_good.batch.taken_at <= self.parts.stale_after_s)
        self.exposition.update(outcome, assessment, keep_readings=fresh_enough)
        view = self._views[outcome.device] = DeviceView(
            outcome, assessment, last_good, withdrawn=not fresh_enough, health_since=since)
        # Called also without events when held conditions moved, so the sink saves them
        # with the lifecycle (a restart must not resolve what the hysteresis holds).
        if (events or self.parts.tracker.dirty) and self.alert_sink is not None:
            self.alert_sink(events)
        return view

    def withdraw_stale(self, now: float) -> list[str]:
        """Take readings older than the stale age out of the metrics (devices whose polls
        fail keep their last readings there only that long). Returns the devices."""
        out = []
        for name, view in list(self._views.items()):
            age = view.stale_for(now)
            if age is not None and not view.withdrawn and age > self.parts.stale_after_s:
                self.exposition.update(view.outcome, None)
                view.withdrawn = True
                out.append(name)
        return out

    def _record(self, a: Assessment) -> None:
        assert self.history is not None
        b = a.batch
        rx = np.flatnonzero(b.quantity == int(Quantity.RX_POWER))
        assert a.edge_sources is not None
        # The margin edges' source (sensitivity's, else overload's): what trends and the
        # report measure margins to.
        src = np.where(a.edge_sources[:, 0] != int(WindowSource.NONE), a.edge_sources[:, 0],
                       a.edge_sources[:, 1])
        windows = [
            RxWindow(b.device, b.optics[int(b.optic[i])].port, int(b.lane[i]),
                     b.optics[int(b.optic[i])].pmd, _edge(a.low_edge[i]), _edge(a.high_edge[i]),
                     WindowSource(int(src[i])).word, b.taken_at)
            for i in rx
        ]
        try:
            self.history.record(b, windows)
        except HistoryError as exc:
            log.error("%s", exc)  # monitoring goes on; the history has a gap

    def _far_ends(self, a: Assessment) -> dict[tuple[str, int, Quantity], AdviceContext]:
        """For each dark receiver: the far end from the plant and what its Tx last read.

        When that transmitter is itself the cause (its laser off, failed, or dark), the
        receiver's row is marked as caused by it, so one cause raises one alert.
        """
        out: dict[tuple[str, int, Quantity], AdviceContext] = {}
        b = a.batch
        dark = np.flatnonzero((a.condition == int(Condition.DARK))
                              & (b.quantity == int(Quantity.RX_POWER)))
        for i in dark.tolist():
            port, lane = b.optics[int(b.optic[i])].port, int(b.lane[i])
            ref = self.plant.far_end(b.device, port)
            if ref is None:
                continue
            far_dev, far_port = ref
            tx_dbm, tx_cond = self._far_tx(far_dev, far_port, lane)
            out[(port, lane, Quantity.RX_POWER)] = AdviceContext(
                far_device=far_dev, far_port=far_port, far_tx_dbm=tx_dbm,
                far_tx_condition=tx_cond)
            if tx_cond in _TX_CAUSES:
                a.cause[i] = alert_key(far_dev, far_port, lane, Quantity.TX_POWER)
        return out

    def _far_tx(self, device: str, port: str, lane: int) -> tuple[float | None, Condition | None]:
        view = self._views.get(device)
        fa = view.assessment if view is not None else None
        if fa is None:
            return None, None
        fb = fa.batch
        for j in np.flatnonzero(fb.quantity == int(Quantity.TX_POWER)).tolist():
            if int(fb.lane[j]) == lane and fb.optics[int(fb.optic[j])].port == port:
                value = float(fb.value[j])
                return (value if np.isfinite(value) else None), Condition(int(fa.condition[j]))
        return None, None

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
            out[(port, lane, q)] = history_advice_context(self.history, self.plant, b.device,
                                                          port, lane, q, now)
        return out

    async def poll_all(self) -> list[DeviceView]:
        """Poll every device once, concurrently; used by `check`."""
        if not self.sources:
            self.build_sources()
        now = self.clock()
        outcomes = await asyncio.gather(*(s.poll(now) for s in self.sources))
        return [self.handle(o) for o in outcomes]
