"""Config reloads (SIGHUP, POST /-/reload): re-read, validate, then apply all at once.

Everything that can fail is done first (reading and validating the file, the rule
parts, the sources of added and changed devices, which reads their secrets); only then,
in one step on the event loop with no await in between, is the new config put in place:

- devices added get a job, devices removed lose theirs (their series end, their open
  alerts resolve as "no longer reported"), devices whose entry, credentials or the
  site-wide poll/ssh settings changed get a new source;
- margins, condition holds and hysteresis, window overrides, PMD additions, the plant and
  alert holds take effect from the next poll;
- open alerts and held conditions of devices that stay are kept as they are.

On any error the running config stays, the error is logged, and the
``lightwarden_self_config_reload_ok`` gauge is 0 until a reload succeeds. Settings only a
restart can change (listen address, state directory, history, alert destinations and
outbox) are left as they are, with a warning naming them.
"""

from __future__ import annotations

import asyncio
import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from lightwarden.collector.entry import BuildContext
from lightwarden.collector.schedule import PollScheduler
from lightwarden.collector.source import PollSource
from lightwarden.exporters.app.config import ConfigError, SiteConfig, load_config
from lightwarden.exporters.app.monitor import Monitor
from lightwarden.exporters.app.sources import build_sources
from lightwarden.exporters.app.wiring import (
    build_catalogue,
    build_overrides,
    fibre_of,
    hysteresis_policy,
    lifecycle_config,
    make_sources,
    margin_targets,
    my_devices,
    plant_of,
)
from lightwarden.rules.windows import WindowResolver

log = logging.getLogger("lightwarden.reload")

#: config sections a reload cannot change in a running process
_RESTART_ONLY = ("listen", "state_dir", "history")
_ALERT_DELIVERY = ("alertmanager", "webhooks", "resend_interval_s", "outbox_path",
                   "labels", "generator_url")


@dataclass(slots=True)
class ReloadResult:
    ok: bool
    message: str
    added: list[str] = field(default_factory=list)
    removed: list[str] = field(default_factory=list)
    changed: list[str] = field(default_factory=list)


def restart_only_changes(old: SiteConfig, new: SiteConfig) -> list[str]:
    """The settings that differ but need a restart to take effect."""
    out = [k for k in _RESTART_ONLY if getattr(old, k) != getattr(new, k)]
    out += [f"alerting.{k}" for k in _ALERT_DELIVERY
            if getattr(old.alerting, k) != getattr(new.alerting, k)]
    return out


def _device_fingerprint(cfg: SiteConfig, d: Any) -> tuple[Any, ...]:
    """What a device's source is built from: its entry, its credential entry, and the
    site-wide settings every source reads."""
    cred = cfg.credentials.get(d.credentials)
    return (d.model_dump_json(), cred.model_dump_json() if cred is not None else None,
            cfg.poll.model_dump_json(), cfg.ssh.model_dump_json())


class Reloader:
    """Holds the path of the running config and applies a new one on request."""

    def __init__(self, monitor: Monitor, cfg: SiteConfig, path: str | Path,
                 base_dir: Path,
                 transform: Callable[[SiteConfig], SiteConfig] | None = None) -> None:
        self.monitor = monitor
        self.cfg = cfg
        self.path = Path(path)
        self.base_dir = base_dir
        #: what the command line changes in every config read (run --shard-index, ...)
        self.transform = transform
        self._lock = asyncio.Lock()

    async def reload(self, sched: PollScheduler) -> ReloadResult:
        async with self._lock:
            try:
                result = self._reload(sched)
            except ConfigError as exc:
                result = ReloadResult(False, str(exc))
            except (ValueError, OSError) as exc:
                result = ReloadResult(False, f"{type(exc).__name__}: {exc}")
        now = time.time()
        if self.monitor.self_metrics is not None:
            self.monitor.self_metrics.observe_reload(result.ok, now)
        if result.ok:
            log.warning("config %s reloaded: %s", self.path, result.message)
        else:
            for line in result.message.splitlines():
                log.error("config reload refused, the previous config keeps running: %s",
                          line)
        return result

    def _reload(self, sched: PollScheduler) -> ReloadResult:
        old, new = self.cfg, load_config(self.path)
        if self.transform is not None:
            new = self.transform(new)
        if not new.devices:
            raise ConfigError(f"{self.path}: devices: the list is empty; nothing to poll")
        # -- everything that can fail, before anything changes --------------------------
        catalogue = build_catalogue(new)
        resolver = WindowResolver(catalogue, build_overrides(new), fibre_of=fibre_of(new))
        targets = margin_targets(new)
        policy = hysteresis_policy(new)
        lc = lifecycle_config(new, targets)
        plant = plant_of(new, catalogue)
        old_devs = {d.name: _device_fingerprint(old, d) for d in my_devices(old)}
        new_list = my_devices(new)
        new_devs = {d.name: _device_fingerprint(new, d) for d in new_list}
        added = sorted(set(new_devs) - set(old_devs))
        removed = sorted(set(old_devs) - set(new_devs))
        changed = sorted(n for n in set(new_devs) & set(old_devs) if new_devs[n] != old_devs[n])
        parts = self.monitor.parts
        build = [d for d in new_list if d.name in set(added) | set(changed)]
        ctx = BuildContext(base_dir=self.base_dir, timeout_s=new.poll.timeout_s,
                           retries=new.poll.retries, pmd_names=tuple(s.name for s in catalogue),
                           shared=parts.shared, state_dir=parts.state_dir)
        fresh: list[PollSource] = build_sources(new, build, ctx) if build else []
        # -- apply: no await from here on, so no poll is handled half-way ------------------
        parts.catalogue, parts.resolver, parts.targets, parts.plant = (
            catalogue, resolver, targets, plant)
        parts.plant_with = lambda pmd_of: plant_of(new, catalogue, pmd_of)
        base, shared, state = self.base_dir, parts.shared, parts.state_dir
        parts.make_sources = lambda: make_sources(new, base, catalogue, shared, state)
        parts.tracker.policy = policy
        parts.stale_after_s = new.poll.stale_after_s
        parts.pad_steps = tuple(new.margins.pads_db)
        self.monitor.lifecycle.config = lc
        self.monitor.plant = plant
        self.monitor.exposition.set_margin_targets(targets.overload_db, targets.sensitivity_db)
        by_name = {d.name: d for d in new_list}
        keep = [s for s in self.monitor.sources if s.name not in set(removed) | set(changed)]
        retired = [s for s in self.monitor.sources if s not in keep]
        sched.interval_s, sched.jitter_s = new.poll.interval_s, new.poll.jitter_s
        sched.backoff_cap_s = new.poll.max_backoff_s
        for name in removed + changed:
            sched.remove_source(name)
        for s in fresh:
            sched.add_source(s, interval_s=by_name[s.name].interval_s)
        self.monitor.set_sources(keep + fresh)
        for s in retired:
            s.close()  # an in-flight poll of it is dropped by Monitor.handle
        for name in removed:
            self.monitor.forget_device(name)
        self.cfg = new
        skipped = restart_only_changes(old, new)
        if skipped:
            log.warning("config %s: %s changed; these take effect at the next restart",
                        self.path, ", ".join(skipped))
        msg = (f"{len(new_list)} devices ({len(added)} added, {len(removed)} removed, "
               f"{len(changed)} changed)")
        return ReloadResult(True, msg, added, removed, changed)
