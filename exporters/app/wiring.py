"""Config -> parts: the catalogue, window overrides, margin targets, hysteresis and alert
policies, the plant, this instance's share of the devices, and the monitor built of them."""

from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path

from lightwarden.collector.entry import BuildContext, SharedParts
from lightwarden.collector.readings import Quantity
from lightwarden.collector.source import PollSource
from lightwarden.exporters.app.config import ConfigError, Device, SiteConfig
from lightwarden.exporters.app.monitor import Monitor, MonitorParts
from lightwarden.exporters.app.shard import mine
from lightwarden.exporters.app.sources import build_sources
from lightwarden.exporters.app.statedir import ensure_state_dir, resolve_state_dir, state_path
from lightwarden.exporters.prometheus.exposition import Exposition
from lightwarden.exporters.prometheus.self_metrics import SelfMetrics
from lightwarden.exporters.store.history import History, HistoryError
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.catalogue import Catalogue, PmdSpec, default_catalogue
from lightwarden.rules.hysteresis import ConditionTracker, HysteresisPolicy
from lightwarden.rules.lifecycle import AlertLifecycle, LifecycleConfig, PolicyOverride
from lightwarden.rules.plant import Plant, build_plant
from lightwarden.rules.windows import WindowOverride, WindowResolver


def build_catalogue(cfg: SiteConfig) -> Catalogue:
    base = default_catalogue()
    if not cfg.pmd_additions:
        return base
    return base.with_additions(
        PmdSpec(
            name=a.name,
            clause=a.clause,
            wavelength_min_nm=a.wavelength_min_nm,
            wavelength_max_nm=a.wavelength_max_nm,
            reach_m=a.reach_m,
            lanes=a.lanes,
            tx_min_dbm=a.tx_min_dbm,
            tx_max_dbm=a.tx_max_dbm,
            rx_overload_dbm=a.rx_overload_dbm,
            rx_min_avg_dbm=a.rx_min_avg_dbm,
            source=a.source,
            fibre=a.fibre or "",
            reach_om1_m=a.reach_om1_m,
            reach_om2_m=a.reach_om2_m,
            reach_om3_m=a.reach_om3_m,
            reach_om4_m=a.reach_om4_m,
            reach_engineered_m=a.reach_engineered_m,
            tx_oma_min_dbm=a.tx_oma_min_dbm,
            rx_sens_oma_dbm=a.rx_sens_oma_dbm,
            er_min_db=a.er_min_db,
            oma_clause=a.oma_clause,
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


def margin_targets(cfg: SiteConfig) -> MarginTargets:
    return MarginTargets(cfg.margins.sensitivity_db, cfg.margins.overload_db)


def hysteresis_policy(cfg: SiteConfig) -> HysteresisPolicy:
    c = cfg.conditions
    return HysteresisPolicy(
        hold_s=c.hold_s,
        clear_hold_s=c.clear_hold_s,
        hysteresis_db=c.hysteresis_db,
        hysteresis_bias_ma=c.hysteresis_bias_ma,
        hysteresis_temperature_c=c.hysteresis_temperature_c,
        hysteresis_supply_v=c.hysteresis_supply_v,
    )


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


def plant_of(cfg: SiteConfig, catalogue: Catalogue,
             pmd_of: dict[tuple[str, str], str] | None = None) -> Plant:
    return build_plant(cfg.plant, catalogue, pmd_of)


def my_devices(cfg: SiteConfig) -> list[Device]:
    """The configured devices this instance polls (all, unless the site is sharded).

    Devices joined by plant spans stay on one instance (see shard.py).
    """
    sh = cfg.shard
    if sh.count == 1:
        return list(cfg.devices)
    links = [(span.a.split()[0], span.b.split()[0]) for span in cfg.plant]
    names = set(mine([d.name for d in cfg.devices], sh.index, sh.count, links))
    return [d for d in cfg.devices if d.name in names]


def as_instance(cfg: SiteConfig, index: int, listen_port: int | None = None) -> SiteConfig:
    """The config of shard instance ``index`` (``run --shard-index``, one per core).

    Overrides ``shard.index``; the instance listens on ``listen.port + index`` unless
    ``listen_port`` is given (or the base port is 0, "any free port"), so instances on one
    host never collide and Prometheus scrapes each at its own port.
    """
    count = cfg.shard.count
    if not 0 <= index < count:
        raise ConfigError(f"--shard-index {index} must be from 0 to shard.count - 1 "
                          f"({count - 1}); set shard.count in the site config")  # fmt: skip
    port = listen_port if listen_port is not None else cfg.listen.port
    if listen_port is None and port:
        port += index
        if port > 65535:
            raise ConfigError(f"listen.port {cfg.listen.port} + shard index {index} is "
                              "above 65535")  # fmt: skip
    return cfg.model_copy(update={
        "shard": cfg.shard.model_copy(update={"index": index}),
        "listen": cfg.listen.model_copy(update={"port": port}),
    })  # fmt: skip


def history_path(cfg: SiteConfig, state_dir: Path) -> Path:
    return state_path(state_dir, cfg.history.path)


def open_history(cfg: SiteConfig, state_dir: Path) -> History | None:
    """The reading history (for trends, advice and the planners' report), if kept."""
    h = cfg.history
    if not h.enabled:
        return None
    path = history_path(cfg, state_dir)
    if path.is_relative_to(state_dir):
        ensure_state_dir(state_dir)
    try:
        return History(path, every_s=h.sample_every_s, keep_days=h.keep_days,
                       raw_days=h.raw_days, daily_days=h.daily_days)
    except HistoryError as exc:
        raise ConfigError(f"history.path: {exc}") from None


def make_sources(cfg: SiteConfig, base_dir: Path, catalogue: Catalogue,
                 shared: SharedParts, state_dir: Path | None = None) -> list[PollSource]:
    ctx = BuildContext(base_dir=base_dir, timeout_s=cfg.poll.timeout_s,
                       retries=cfg.poll.retries,
                       pmd_names=tuple(s.name for s in catalogue), shared=shared,
                       state_dir=state_dir)
    return build_sources(cfg, my_devices(cfg), ctx)


def fibre_of(cfg: SiteConfig) -> dict[tuple[str, str], str]:
    """The plant's fibre at each recorded port: which row of a PMD judges its optic."""
    out: dict[tuple[str, str], str] = {}
    for sp in cfg.plant:
        for end in (sp.a, sp.b):
            device, port = end.split()
            out[(device, port)] = sp.fibre
    return out


def preflight(cfg: SiteConfig, *, base_dir: Path, state_dir: Path, alerts: bool = True,
              clock: Callable[[], float] = time.time) -> Monitor:
    """The one set of checks `run`, `check` and `validate` make before polling, and the
    monitor they make it with: a device list (an empty shard of a sharded site is fine),
    every source built (secrets read, platforms loaded, known_hosts present), the alert
    destinations' secrets read. Writes nothing; the caller closes the monitor."""
    if not cfg.devices:
        raise ConfigError("devices: the list is empty; there is nothing to poll")
    monitor = build_monitor(cfg, base_dir=base_dir, state_dir=state_dir, alerts=alerts,
                            clock=clock)
    try:
        monitor.build_sources()
        if alerts:
            from lightwarden.exporters.app.alerting import destinations

            destinations(cfg, base_dir)
    except BaseException:
        monitor.close()
        raise
    return monitor


def build_monitor(
    cfg: SiteConfig,
    *,
    base_dir: Path | None = None,
    state_dir: Path | None = None,
    clock: Callable[[], float] = time.time,
    alerts: bool = True,
    lifecycle: AlertLifecycle | None = None,
) -> Monitor:
    """A monitor for this site config; sources are built (and secrets read) on first use.

    ``base_dir`` is the config file's folder (secrets, platform files); ``state_dir``
    where everything written lives (default: statedir.resolve_state_dir)."""
    base = base_dir or Path.cwd()
    state = state_dir or resolve_state_dir(None, cfg.state_dir, config_dir=base)
    catalogue = build_catalogue(cfg)
    targets = margin_targets(cfg)
    shared = SharedParts()
    parts = MonitorParts(
        site=cfg.site,
        catalogue=catalogue,
        resolver=WindowResolver(catalogue, build_overrides(cfg), fibre_of=fibre_of(cfg)),
        targets=targets,
        tracker=ConditionTracker(hysteresis_policy(cfg)),
        lifecycle=lifecycle or AlertLifecycle(lifecycle_config(cfg, targets)),
        exposition=Exposition(margin_target_overload_db=targets.overload_db,
                              margin_target_sensitivity_db=targets.sensitivity_db),
        plant=plant_of(cfg, catalogue),
        plant_with=lambda pmd_of: plant_of(cfg, catalogue, pmd_of),
        make_sources=lambda: make_sources(cfg, base, catalogue, shared, state),
        make_history=lambda: open_history(cfg, state),
        shared=shared,
        state_dir=state,
        stale_after_s=cfg.poll.stale_after_s,
        pad_steps=tuple(cfg.margins.pads_db),
    )
    own = SelfMetrics()
    parts.exposition.set_self_metrics(own)
    return Monitor(parts, clock=clock, alerts=alerts, self_metrics=own)
