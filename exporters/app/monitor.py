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
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from lightwarden.collector.entry import SharedParts
from lightwarden.collector.readings import OpticIdentity, PollOutcome, Quantity, ReadingStatus
from lightwarden.collector.source import PollSource
from lightwarden.exporters.pages.view import DeviceView, LinkLoss
from lightwarden.exporters.prometheus.drift_metrics import DriftGauges
from lightwarden.exporters.prometheus.exposition import Exposition
from lightwarden.exporters.prometheus.self_metrics import SelfMetrics
from lightwarden.exporters.store.gather import history_advice_context, lane_outlooks
from lightwarden.exporters.store.history import History, HistoryError
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets, assess
from lightwarden.rules.catalogue import Catalogue, PmdSpec
from lightwarden.rules.consistency import (
    Finding,
    check_optic,
    check_patching,
    check_spans,
    discovered_links,
    spans_by_device,
)
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
from lightwarden.rules.link_alerts import LinkAlerts
from lightwarden.rules.outlook import RxWindow
from lightwarden.rules.plant import Plant
from lightwarden.rules.plausibility import flag_implausible
from lightwarden.rules.spanloss import engineered_loss_db
from lightwarden.rules.windows import WindowResolver

log = logging.getLogger("lightwarden.monitor")

_AGEING = (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS)
#: how often (poll time) the drift gauges are recomputed from history, over how many days
DRIFT_EVERY_S = 3600.0
DRIFT_DAYS = 90.0
#: devices first recorded since the last refresh bring the next one forward to this long
#: after it (the first round of polls at start-up, a device added by a reload)
DRIFT_SETTLE_S = 30.0
#: Conditions of a far transmitter that explain a dark receiver.
_TX_CAUSES = (Condition.LASER_OFF, Condition.TX_FAULT, Condition.DARK)
AlertSink = Callable[[list[AlertEvent]], None]


def _merged(base: AdviceContext, extra: AdviceContext) -> AdviceContext:
    """``base`` (history facts) with every far-end and pad fact ``extra`` knows."""
    changes = {f: getattr(extra, f) for f in (
        "far_device", "far_port", "far_tx_dbm", "far_tx_condition", "far_tx_min_dbm",
        "far_tx_max_dbm", "far_window_from", "span_loss_db", "span_loss_from",
        "own_tx_min_dbm", "own_tx_max_dbm", "hysteresis_db", "pad_steps")
        if getattr(extra, f) not in (None, "")}
    return replace(base, **changes)


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
    pad_steps: tuple[float, ...] = ()  # the site's stocked pads; () is the common stock


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
        self.drift = DriftGauges()
        self.exposition.set_extra_source(self.drift.text)
        self._next_drift = -math.inf
        self._last_drift = -math.inf
        self._drift_devices: set[str] = set()
        self._drift_stale = False
        self._contexts: dict[tuple[str, str, int, Quantity], tuple[float, AdviceContext]] = {}
        self._drift_busy = threading.Lock()
        # Consistency: each port's latest identity (kept while its device is silent, so a
        # missed poll resolves nothing), the findings now present, and their alerts.
        self.link_alerts = LinkAlerts()
        self._identities: dict[str, dict[str, OpticIdentity]] = {}  # device -> port -> id
        self._spans_of = spans_by_device(self.plant)
        self._findings: dict[str, Finding] = {}
        self.exposition.set_link_source(self.link_issues)

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
        """Open reading alerts, then open link-finding alerts."""
        return self.lifecycle.open_alerts() + self.link_alerts.open_alerts()

    def plant_with_history(self) -> Plant:
        """The plant, with span wavelengths taken from the PMDs the history has seen."""
        if self.history is None:
            return self.plant
        pmd_of = {(w.device, w.port): w.pmd for w in self.history.rx_windows()}
        return self.parts.plant_with(pmd_of)

    def link_issues(self) -> list[Finding]:
        """Consistency findings now present (rules/consistency.py), worst first."""
        found = list(self._findings.values())
        found.sort(key=lambda f: (-f.severity, f.key))
        return found

    def _identity(self, device: str, port: str) -> OpticIdentity | None:
        return self._identities.get(device, {}).get(port)

    def _check_links(self, outcome: PollOutcome, now: float) -> list[AlertEvent]:
        """Re-check the ports and spans of a device just polled; their alert events."""
        batch, device = outcome.batch, outcome.device
        if batch is None:
            return []  # no evidence either way
        own = self._identities[device] = {o.port: o for o in batch.optics}
        found = [f for o in own.values() for f in check_optic(o, self.catalogue)]
        found += check_spans(self._spans_of.get(device, ()), self._identity, self.catalogue)
        # LLDP: the patching against the record, and far ends for unrecorded ports
        names = self._device_names()
        found += check_patching(own.values(), self.plant, names)
        for ref, far in discovered_links(own.values(), self.plant, names).items():
            self.plant.far.setdefault(ref, far)
        for fkey in [k for k, f in self._findings.items() if f.involves(device)]:
            del self._findings[fkey]
        self._findings.update((f.key, f) for f in found)
        if not self._alerts_enabled:
            return []
        return self.link_alerts.observe(found, {device}, now)

    def _device_names(self) -> set[str]:
        """Devices an LLDP neighbour may be: ours (polled here) and the plant's."""
        names = set(self._views) | (self._active or set())
        for sp in self.plant.spans:
            names.update((sp.a_device, sp.b_device))
        return names

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
        if self._active is not None and outcome.device not in self._active:
            return DeviceView(outcome, None)  # removed by a reload while it was polled
        now = outcome.started_at + outcome.duration_s
        if self.self_metrics is not None:
            self.self_metrics.observe_poll(outcome.duration_s, outcome.ok)
        assessment = None
        events: list[AlertEvent] = []
        far: dict[tuple[str, int, Quantity], AdviceContext] = {}
        if outcome.batch is not None:
            flag_implausible(outcome.batch)  # a broken sensor's value is never judged
            assessment = assess(outcome.batch, targets=self.targets, tracker=self.parts.tracker,
                                now=now, resolver=self.parts.resolver)
            far = self._far_ends(assessment)
            far.update(self._pad_facts(assessment))
            if self.history is not None:
                self._record(assessment)
            if self._alerts_enabled:
                context = self._context(assessment, now)
                for k, ctx in far.items():
                    context[k] = _merged(context[k], ctx) if k in context else ctx
                events = self.lifecycle.observe(assessment, now, context)
        elif self._alerts_enabled:
            events = self.lifecycle.mark_stale(outcome.device, now)
        events += self._check_links(outcome, now)
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
            outcome, assessment, last_good=last_good, withdrawn=not fresh_enough,
            health_since=since, contexts=far if outcome.batch is not None else {},
            links=self._links(assessment) if assessment is not None else {})
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

    def _links(self, a: Assessment) -> dict[tuple[str, int], LinkLoss]:
        """Every lane with a far end in the plant: the span's loss measured both ways
        (from the latest polls of both ends) and as engineered."""
        out: dict[tuple[str, int], LinkLoss] = {}
        b = a.batch
        here: dict[tuple[str, int, int], float] = {}
        ok = b.status == int(ReadingStatus.OK)
        for i in np.flatnonzero(ok & ((b.quantity == int(Quantity.RX_POWER))
                                      | (b.quantity == int(Quantity.TX_POWER)))).tolist():
            here[(b.optics[int(b.optic[i])].port, int(b.lane[i]), int(b.quantity[i]))] = float(
                b.value[i])
        lanes = {(b.optics[int(b.optic[i])].port, int(b.lane[i]))
                 for i in np.flatnonzero(b.quantity == int(Quantity.RX_POWER)).tolist()
                 if int(b.lane[i]) > 0}
        for port, lane in sorted(lanes):
            ref = self.plant.far_end(b.device, port)
            if ref is None:
                continue
            far_dev, far_port = ref
            far_tx, _ = self._far_tx(far_dev, far_port, lane)
            far_rx, _ = self._far_reading(far_dev, far_port, lane, Quantity.RX_POWER)
            rx = here.get((port, lane, int(Quantity.RX_POWER)))
            tx = here.get((port, lane, int(Quantity.TX_POWER)))
            out[(port, lane)] = LinkLoss(
                far=f"{far_dev} {far_port}",
                loss_in_db=None if far_tx is None or rx is None else far_tx - rx,
                loss_out_db=None if tx is None or far_rx is None else tx - far_rx,
                engineered_db=self._engineered(far_dev, far_port, b.device, port))
        return out

    def _pad_facts(self, a: Assessment) -> dict[tuple[str, int, Quantity], AdviceContext]:
        """For each receiver on the overload side: what a worst-case pad must know (the
        far transmitter's window, the span loss this way, this optic's own window)."""
        out: dict[tuple[str, int, Quantity], AdviceContext] = {}
        b = a.batch
        hot = np.flatnonzero((b.quantity == int(Quantity.RX_POWER)) & np.isin(
            a.condition, [int(Condition.NEAR_OVERLOAD), int(Condition.OVERLOADED),
                          int(Condition.WARNING), int(Condition.ALARM)]))
        for i in hot.tolist():
            optic = b.optics[int(b.optic[i])]
            lane, rx = int(b.lane[i]), float(b.value[i])
            own = self.catalogue.lookup(optic.pmd) if optic.pmd else None
            facts: dict[str, object] = {}
            if own is not None:
                facts.update(own_tx_min_dbm=own.tx_min_dbm, own_tx_max_dbm=own.tx_max_dbm)
            ref = self.plant.far_end(b.device, optic.port)
            if ref is not None:
                far_dev, far_port = ref
                facts.update(far_device=far_dev, far_port=far_port)
                lo, hi, where = self._far_window(far_dev, far_port, own)
                facts.update(far_tx_min_dbm=lo, far_tx_max_dbm=hi, far_window_from=where)
                tx_dbm, _ = self._far_tx(far_dev, far_port, lane)
                if tx_dbm is not None and np.isfinite(rx):
                    facts.update(span_loss_db=tx_dbm - rx, span_loss_from="measured",
                                 far_tx_dbm=tx_dbm)
                else:
                    loss = self._engineered(far_dev, far_port, b.device, optic.port)
                    if loss is not None:
                        facts.update(span_loss_db=loss, span_loss_from="engineered")
            facts["hysteresis_db"] = self.parts.tracker.policy.hysteresis_db
            facts["pad_steps"] = self.parts.pad_steps
            out[(optic.port, lane, Quantity.RX_POWER)] = AdviceContext(**facts)  # type: ignore[arg-type]
        return out

    def _far_window(self, device: str, port: str, fallback: PmdSpec | None
                    ) -> tuple[float | None, float | None, str]:
        """The far transmitter's launch window: its PMD row, else its module's Tx alarms,
        else (not polled yet) this end's PMD row, saying which."""
        view = self._views.get(device)
        batch = view.outcome.batch if view is not None else None
        optic = next((o for o in batch.optics if o.port == port), None) if batch else None
        if optic is not None:
            spec = self.catalogue.lookup(optic.pmd) if optic.pmd else None
            if spec is not None and spec.tx_min_dbm is not None:
                return spec.tx_min_dbm, spec.tx_max_dbm, f"{spec.name} standard"
            t = optic.thresholds.get(Quantity.TX_POWER)
            if t is not None and t.low_alarm is not None:
                return t.low_alarm, t.high_alarm, "its module's Tx alarms"
        if fallback is not None and fallback.tx_min_dbm is not None:
            return fallback.tx_min_dbm, fallback.tx_max_dbm, (
                f"assumed {fallback.name}, as this end")
        return None, None, ""

    def _engineered(self, tx_dev: str, tx_port: str, rx_dev: str, rx_port: str
                    ) -> float | None:
        for sp in self.plant.spans:
            a, b = (sp.a_device, sp.a_port), (sp.b_device, sp.b_port)
            if {a, b} == {(tx_dev, tx_port), (rx_dev, rx_port)}:
                try:
                    return engineered_loss_db(sp, direction="a->b" if a == (tx_dev, tx_port)
                                              else "b->a")
                except ValueError:
                    return None
        return None

    def _far_tx(self, device: str, port: str, lane: int) -> tuple[float | None, Condition | None]:
        return self._far_reading(device, port, lane, Quantity.TX_POWER)

    def _far_reading(self, device: str, port: str, lane: int, q: Quantity
                     ) -> tuple[float | None, Condition | None]:
        """One reading of another device's latest poll: its value (None without one) and
        its held condition; (None, None) when that device or row is not known."""
        view = self._views.get(device)
        fa = view.assessment if view is not None else None
        if fa is None:
            return None, None
        fb = fa.batch
        for j in np.flatnonzero(fb.quantity == int(q)).tolist():
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
        views = [self.handle(o) for o in outcomes]
        # One sweep sees every device at once: a receiver handled before its far end's
        # device learns its cause (and the far end's readings) on a second look.
        for n, view in enumerate(views):
            if view.assessment is not None:
                merged = {**view.contexts, **self._far_ends(view.assessment),
                          **self._pad_facts(view.assessment)}
                views[n] = self._views[view.outcome.device] = replace(
                    view, contexts=merged, links=self._links(view.assessment))
        return views
