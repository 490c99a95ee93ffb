"""The composition root: wires a site config to sources, the rule layer and the exporters.

``Monitor`` owns one of each long-lived part (window resolver, condition tracker, alert
lifecycle, exposition cache, dispatcher) and handles every poll outcome the same way,
whether it came from the schedule (`run`, `demo`) or from a single sweep (`check`).
"""

from __future__ import annotations

import asyncio
import logging
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from lightwarden.collector.platforms.platform import PlatformError, load_platform
from lightwarden.collector.readings import OpticIdentity, PollOutcome, Quantity
from lightwarden.collector.schedule import PollScheduler
from lightwarden.collector.snmp.credentials import CredentialsError, SnmpCredentials
from lightwarden.collector.snmp.session import EnginePool
from lightwarden.collector.snmp.source import SnmpSource
from lightwarden.collector.source import PollSource
from lightwarden.collector.ssh_source import SshCredentials, SshSource, SshWorkers
from lightwarden.exporters.config import ConfigError, Device, SiteConfig
from lightwarden.exporters.history import History, HistoryError, RxWindow
from lightwarden.exporters.metrics import Exposition
from lightwarden.exporters.plant import Plant, build_plant
from lightwarden.exporters.report import advice_context
from lightwarden.exporters.shard import mine
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets, assess
from lightwarden.rules.catalogue import Catalogue, PmdSpec, default_catalogue
from lightwarden.rules.findings import AlertEvent, Assessment, Condition, WindowSource
from lightwarden.rules.hysteresis import ConditionTracker, HysteresisPolicy
from lightwarden.rules.lifecycle import AlertLifecycle, LifecycleConfig, PolicyOverride
from lightwarden.rules.spanloss import LinkIssue, check_link
from lightwarden.rules.windows import WindowOverride, WindowResolver

log = logging.getLogger("lightwarden.service")

_SEVERITY = np.array([c.severity for c in sorted(Condition)], dtype=np.int8)
_AGEING = (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS)


def _edge(x: float) -> float | None:
    return None if np.isnan(x) else float(x)


def build_catalogue(cfg: SiteConfig) -> Catalogue:
    base = default_catalogue()
    if not cfg.pmd_additions:
        return base
    return base.with_additions(
        PmdSpec(
            name=a.name,
            clause="",
            wavelength_min_nm=a.wavelength_min_nm,
            wavelength_max_nm=a.wavelength_max_nm,
            reach_m=a.reach_m,
            lanes=a.lanes,
            tx_min_dbm=a.tx_min_dbm,
            tx_max_dbm=a.tx_max_dbm,
            rx_overload_dbm=a.rx_overload_dbm,
            rx_min_avg_dbm=a.rx_min_avg_dbm,
            source=a.source,
        )
        for a in cfg.pmd_additions
    )


def build_overrides(cfg: SiteConfig) -> list[WindowOverride]:
    out = []
    for i, o in enumerate(cfg.overrides):
        device = port = None
        if o.port is not None:
            device, port = o.port.split()
        try:
            out.append(
                WindowOverride(
                    quantity=Quantity[o.quantity.upper()],
                    device=device,
                    port=port,
                    part_number=o.part_number,
                    lane=o.lane,
                    low_alarm=o.low_alarm,
                    low_warning=o.low_warning,
                    high_warning=o.high_warning,
                    high_alarm=o.high_alarm,
                    rx_overload=o.rx_overload_dbm,
                    rx_sensitivity=o.rx_sensitivity_dbm,
                )
            )
        except ValueError as exc:
            raise ConfigError(f"overrides[{i}]: {exc}") from None
    return out


def lifecycle_config(cfg: SiteConfig, targets: MarginTargets) -> LifecycleConfig:
    per_quantity: dict[Quantity, PolicyOverride] = {}
    per_lane: dict[tuple[Quantity, int], PolicyOverride] = {}
    for h in cfg.alerting.holds:
        q = Quantity[h.quantity.upper()]
        override = PolicyOverride(open_hold_s=h.open_hold_s, resolve_hold_s=h.resolve_hold_s,
                                  update_step=h.update_step)
        if h.lane is None:
            per_quantity[q] = override
        else:
            per_lane[(q, h.lane)] = override
    return LifecycleConfig(
        open_hold_s=cfg.alerting.open_hold_s,
        resolve_hold_s=cfg.alerting.resolve_hold_s,
        per_quantity=per_quantity,
        per_lane=per_lane,
        targets=targets,
    )


@dataclass(slots=True)
class DeviceView:
    """The latest poll of one device, as the check command and status page read it."""

    outcome: PollOutcome
    assessment: Assessment | None


class Monitor:
    """Everything between a site config and the outside world, minus the HTTP socket."""

    def __init__(
        self,
        cfg: SiteConfig,
        *,
        base_dir: Path | None = None,
        clock: Callable[[], float] = time.time,
        alerts: bool = True,
    ) -> None:
        self.cfg = cfg
        self.base_dir = base_dir or Path.cwd()
        self.clock = clock
        self.catalogue = build_catalogue(cfg)
        self.resolver = WindowResolver(self.catalogue, build_overrides(cfg))
        self.targets = MarginTargets(cfg.margins.sensitivity_db, cfg.margins.overload_db)
        c = cfg.conditions
        self.tracker = ConditionTracker(
            HysteresisPolicy(
                hold_s=c.hold_s,
                clear_hold_s=c.clear_hold_s,
                hysteresis_db=c.hysteresis_db,
                hysteresis_bias_ma=c.hysteresis_bias_ma,
                hysteresis_temperature_c=c.hysteresis_temperature_c,
                hysteresis_supply_v=c.hysteresis_supply_v,
            )
        )
        self.lifecycle = AlertLifecycle(lifecycle_config(cfg, self.targets))
        self.exposition = Exposition(
            margin_target_overload_db=self.targets.overload_db,
            margin_target_sensitivity_db=self.targets.sensitivity_db,
        )
        self.plant = build_plant(cfg, self.catalogue)
        self.history: History | None = None
        self.views: dict[str, DeviceView] = {}
        self.open_alerts: dict[str, AlertEvent] = {}
        self.alert_sink: Callable[[list[AlertEvent]], None] | None = None
        self._alerts_enabled = alerts
        self._engines: EnginePool | None = None
        self._ssh_workers: SshWorkers | None = None
        self.sources: list[PollSource] = []
        self.exposition.set_alert_source(lambda: list(self.open_alerts.values()))

    def devices(self) -> list[Device]:
        """The configured devices this instance polls (all, unless the site is sharded)."""
        sh = self.cfg.shard
        if sh.count == 1:
            return list(self.cfg.devices)
        names = set(mine([d.name for d in self.cfg.devices], sh.index, sh.count))
        return [d for d in self.cfg.devices if d.name in names]

    # -- sources --------------------------------------------------------------------
    def build_sources(self) -> list[PollSource]:
        """Make one source per device. Reads secrets; errors name device and reference."""
        cfg = self.cfg
        pmd_names = tuple(s.name for s in self.catalogue)
        sources: list[PollSource] = []
        platforms: dict[str, object] = {}
        for d in self.devices():
            cred = cfg.credentials[d.credentials]
            timeout = d.timeout_s or cfg.poll.timeout_s
            retries = d.retries if d.retries is not None else cfg.poll.retries
            try:
                if d.protocol == "snmp":
                    if self._engines is None:
                        self._engines = EnginePool()
                    if cred.snmp_v2c is not None:
                        creds = SnmpCredentials.v2c(cred.snmp_v2c.community.read(self.base_dir))
                    else:
                        v3 = cred.snmp_v3
                        assert v3 is not None
                        creds = SnmpCredentials.v3(
                            v3.user,
                            v3.auth_key.read(self.base_dir),
                            v3.priv_key.read(self.base_dir),
                            auth_protocol=v3.auth_protocol,
                            priv_protocol=v3.priv_protocol,
                            context=v3.context,
                        )
                    sources.append(
                        SnmpSource(d.name, d.host, creds, port=d.port or 161, timeout=timeout,
                                   retries=retries, pmd_names=pmd_names, engines=self._engines,
                                   eeprom_oid=d.eeprom_oid)
                    )
                else:
                    ssh = cred.ssh
                    assert ssh is not None and d.platform is not None
                    if self._ssh_workers is None:
                        self._ssh_workers = SshWorkers(cfg.poll.ssh_threads)
                    if d.platform not in platforms:
                        ref = Path(d.platform)
                        if ref.suffix in (".yaml", ".yml") and not ref.is_absolute():
                            ref = self.base_dir / ref
                        platforms[d.platform] = load_platform(ref if ref.suffix else d.platform)
                    known = d.known_hosts or cfg.ssh.known_hosts
                    if known is not None and not Path(known).is_absolute():
                        known = str(self.base_dir / known)
                    sources.append(
                        SshSource(
                            d.name, d.host, platforms[d.platform],  # type: ignore[arg-type]
                            SshCredentials(
                                ssh.username,
                                password=ssh.password.read(self.base_dir) if ssh.password else "",
                                key_file=ssh.key_file,
                                key_passphrase=(ssh.passphrase.read(self.base_dir)
                                                if ssh.passphrase else ""),
                            ),
                            self._ssh_workers,
                            port=d.port or 22,
                            known_hosts=known,
                            strict_host_key=cfg.ssh.strict_host_keys,
                            connect_timeout=max(timeout, 5.0),
                            read_timeout=cfg.ssh.read_timeout_s,
                            max_sessions=cfg.poll.ssh_per_device,
                            read_maps=d.read_maps,
                        )
                    )
            except (ConfigError, CredentialsError, PlatformError) as exc:
                raise ConfigError(f"device {d.name!r} (credentials {d.credentials!r}): {exc}") \
                    from None
        self.sources = sources
        return sources

    def open_history(self) -> History | None:
        """Start keeping reading history (for trends, advice and the planners' report)."""
        h = self.cfg.history
        if not h.enabled:
            return None
        path = Path(h.path)
        if not path.is_absolute():
            path = self.base_dir / path
        try:
            self.history = History(path, every_s=h.sample_every_s, keep_days=h.keep_days)
        except HistoryError as exc:
            raise ConfigError(f"history.path: {exc}") from None
        return self.history

    def plant_with_history(self) -> Plant:
        """The plant, with span wavelengths taken from the PMDs the history has seen."""
        if self.history is None:
            return self.plant
        pmd_of = {(w.device, w.port): w.pmd for w in self.history.rx_windows()}
        return build_plant(self.cfg, self.catalogue, pmd_of)

    def link_issues(self) -> list[LinkIssue]:
        """Spans in the plant record whose two ends do not belong together (wrong PMD,
        wavelength, or BiDi pairing), from the latest identity of each end."""
        optics: dict[tuple[str, str], OpticIdentity] = {}
        for view in self.views.values():
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

    def close(self) -> None:
        if self.history is not None:
            self.history.close()
            self.history = None
        for s in self.sources:
            close = getattr(s, "close", None)
            if close is not None:
                close()
        if self._engines is not None:
            self._engines.close()
        if self._ssh_workers is not None:
            self._ssh_workers.shutdown(wait=False)

    def mount_pages(self, server: object) -> None:
        """Serve the status page and JSON API on the monitor's HTTP server."""
        from lightwarden.exporters.status_page import StatusPage

        StatusPage(self).mount(server)  # type: ignore[arg-type]

    # -- handling outcomes ----------------------------------------------------------
    def handle(self, outcome: PollOutcome) -> DeviceView:
        """Judge one poll, update metrics and alerts. Never raises for device trouble."""
        now = outcome.started_at + outcome.duration_s
        assessment = None
        events: list[AlertEvent] = []
        if outcome.batch is not None:
            assessment = assess(outcome.batch, targets=self.targets, tracker=self.tracker,
                                now=now, resolver=self.resolver)
            if self.history is not None:
                self._record(assessment)
            if self._alerts_enabled:
                events = self.lifecycle.observe(assessment, now, self._context(assessment, now))
        elif self._alerts_enabled:
            events = self.lifecycle.mark_stale(outcome.device, now)
        self.exposition.update(outcome, assessment)
        view = self.views[outcome.device] = DeviceView(outcome, assessment)
        if events:
            self._track(events)
            if self.alert_sink is not None:
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

    def _context(self, a: Assessment, now: float) -> dict[tuple[str, int, Quantity],
                                                           AdviceContext]:
        """History facts for the rows that may alert (few per poll), none for the rest."""
        if self.history is None:
            return {}
        out: dict[tuple[str, int, Quantity], AdviceContext] = {}
        b = a.batch
        for i in np.flatnonzero(_SEVERITY[a.condition.astype(np.int64)] >= 2):
            q = Quantity(int(b.quantity[i]))
            if q not in _AGEING:
                continue
            port, lane = b.optics[int(b.optic[i])].port, int(b.lane[i])
            out[(port, lane, q)] = advice_context(self.history, self.plant, b.device, port,
                                                  lane, q, now)
        return out

    def _track(self, events: list[AlertEvent]) -> None:
        for e in events:
            if e.kind == "resolve":
                self.open_alerts.pop(e.key, None)
            else:
                self.open_alerts[e.key] = e

    async def poll_all(self) -> list[DeviceView]:
        """Poll every device once, concurrently; used by `check`."""
        if not self.sources:
            self.build_sources()
        now = self.clock()
        outcomes = await asyncio.gather(*(s.poll(now) for s in self.sources))
        return [self.handle(o) for o in outcomes]

    def scheduler(self) -> PollScheduler:
        if not self.sources:
            self.build_sources()
        sched = PollScheduler(
            interval_s=self.cfg.poll.interval_s,
            jitter_s=self.cfg.poll.jitter_s,
            on_outcome=self.handle,
            clock=self.clock,
            backoff_cap_s=self.cfg.poll.max_backoff_s,
        )
        by_name = {d.name: d for d in self.cfg.devices}
        for s in self.sources:
            sched.add_source(s, interval_s=by_name[s.name].interval_s)
        return sched
