"""Alert delivery for a running monitor: outbox, dispatcher and persisted held state.

The lifecycle's state and the condition tracker's held state (hysteresis, holds) are
saved together, in one outbox transaction, after every poll that changed either; so a
restarted or crashed monitor neither re-opens alerts it already sent nor forgets open
ones, and a reading held inside its hysteresis band is not resolved by the restart. The
outbox's unique (key, sequence, destination) rows make a replay after a crash harmless.
"""

from __future__ import annotations

import logging
from pathlib import Path

from lightwarden.exporters.alerts.delivery import Dispatcher
from lightwarden.exporters.alerts.http import AlertDestination
from lightwarden.exporters.alerts.outbox import Outbox, OutboxError
from lightwarden.exporters.app.config import ConfigError, SiteConfig
from lightwarden.exporters.app.statedir import ensure_state_dir, state_path
from lightwarden.rules.findings import AlertEvent
from lightwarden.rules.hysteresis import ConditionTracker
from lightwarden.rules.lifecycle import AlertLifecycle
from lightwarden.rules.link_alerts import LinkAlerts

log = logging.getLogger("lightwarden.alerting")

LIFECYCLE_STATE = "lifecycle"
LINK_ALERTS_STATE = "link-alerts"
#: one snapshot per device: "held/<device>" (a poll changes one device's rows only)
HELD_STATE = "held/"


class AlertRunner:
    """Hands each poll's events to delivery and saves the lifecycle and the held
    conditions beside them."""

    def __init__(self, lifecycle: AlertLifecycle, outbox: Outbox, dispatcher: Dispatcher,
                 links: LinkAlerts | None = None,
                 tracker: ConditionTracker | None = None) -> None:
        self.lifecycle = lifecycle
        self.outbox = outbox
        self.dispatcher = dispatcher
        self.links = links
        self.tracker = tracker

    def submit(self, events: list[AlertEvent]) -> None:
        if events:
            self.dispatcher.submit(events)
        self.save(everything=False)

    def save(self, everything: bool = True) -> None:
        """The lifecycle, link alerts and the held state of changed (or all) devices, in
        one transaction."""
        states = {LIFECYCLE_STATE: self.lifecycle.snapshot()}
        if self.links is not None:
            states[LINK_ALERTS_STATE] = self.links.to_dict()
        if self.tracker is not None:
            held = (self.tracker.snapshot_devices() if everything
                    else self.tracker.snapshot_devices(dirty=True))
            states.update({HELD_STATE + d: body for d, body in held.items()})
        self.outbox.save_states(states)

    def stop(self, drain_timeout: float = 5.0) -> None:
        self.dispatcher.stop(drain_timeout)
        self.save()
        self.outbox.close()


def restore_held(tracker: ConditionTracker, outbox: Outbox) -> None:
    """Take up each device's saved held conditions; a damaged one starts afresh."""
    for name in outbox.state_names(HELD_STATE):
        try:
            body = outbox.load_state(name)
            skipped = tracker.load_device(body) if body is not None else 0
        except (OutboxError, ValueError) as exc:
            log.warning("held conditions %s in %s not restored: %s", name, outbox.path, exc)
            continue
        if skipped:
            log.warning("held conditions %s: %d rows not restored (unknown codes or "
                        "damaged); they start afresh", name, skipped)


def destinations(cfg: SiteConfig, base_dir: Path) -> list[AlertDestination]:
    out = []
    labels = dict(cfg.alerting.labels)
    gen = cfg.alerting.generator_url or ""
    for kind, items in (("alertmanager", cfg.alerting.alertmanager),
                        ("webhook", cfg.alerting.webhooks)):
        for i, d in enumerate(items):
            where = f"alerting.{'alertmanager' if kind == 'alertmanager' else 'webhooks'}[{i}]"
            secret = d.secret.read(base_dir) if d.secret is not None else None
            try:
                out.append(AlertDestination(kind=kind, url=d.url, secret=secret,
                                            timeout_s=d.timeout_s, static_labels=labels,
                                            generator_url=gen))
            except ValueError as exc:
                raise ConfigError(f"{where}: {exc}") from None
    return out


def outbox_path(cfg: SiteConfig, state_dir: Path) -> Path:
    return state_path(state_dir, cfg.alerting.outbox_path)


def start_alerting(lifecycle: AlertLifecycle, cfg: SiteConfig,
                   base_dir: Path, state_dir: Path, links: LinkAlerts | None = None,
                   tracker: ConditionTracker | None = None) -> AlertRunner | None:
    """Restore the lifecycle's saved state and start delivery; None when no destination
    is configured. Secrets resolve against ``base_dir``, the outbox against
    ``state_dir``."""
    dests = destinations(cfg, base_dir)
    if not dests:
        return None
    path = outbox_path(cfg, state_dir)
    if path.is_relative_to(state_dir):
        ensure_state_dir(state_dir)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        outbox = Outbox(path)
        saved = outbox.load_state(LIFECYCLE_STATE)
        saved_links = outbox.load_state(LINK_ALERTS_STATE) if links is not None else None
    except (OSError, OutboxError) as exc:
        raise ConfigError(f"alerting.outbox_path {path}: {exc}") from None
    if saved is not None:
        try:
            lifecycle.load(saved)
        except ValueError as exc:
            # A damaged snapshot must not stop monitoring: start afresh, keep the file.
            log.warning("alert state in %s not restored: %s", path, exc)
    if links is not None and saved_links is not None:
        try:
            links.load(saved_links)
        except ValueError as exc:
            log.warning("link alert state in %s not restored: %s", path, exc)
    if tracker is not None:
        restore_held(tracker, outbox)
    try:
        dispatcher = Dispatcher(outbox, dests, resend_interval_s=cfg.alerting.resend_interval_s)
    except ValueError as exc:
        raise ConfigError(f"alerting: {exc}") from None
    runner = AlertRunner(lifecycle, outbox, dispatcher, links, tracker)
    dispatcher.start()
    return runner
