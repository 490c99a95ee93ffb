"""Alert delivery for a running monitor: outbox, dispatcher and persisted lifecycle.

The lifecycle's state is saved in the outbox file after every batch of events, so a
restarted monitor neither re-opens alerts it already sent nor forgets open ones; the
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
from lightwarden.rules.lifecycle import AlertLifecycle

log = logging.getLogger("lightwarden.alerting")

LIFECYCLE_STATE = "lifecycle"


class AlertRunner:
    """Hands each poll's events to delivery and saves the lifecycle beside them."""

    def __init__(self, lifecycle: AlertLifecycle, outbox: Outbox, dispatcher: Dispatcher) -> None:
        self.lifecycle = lifecycle
        self.outbox = outbox
        self.dispatcher = dispatcher

    def submit(self, events: list[AlertEvent]) -> None:
        self.dispatcher.submit(events)
        self.outbox.save_state(LIFECYCLE_STATE, self.lifecycle.snapshot())

    def stop(self, drain_timeout: float = 5.0) -> None:
        self.dispatcher.stop(drain_timeout)
        self.outbox.save_state(LIFECYCLE_STATE, self.lifecycle.snapshot())
        self.outbox.close()


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
                   base_dir: Path, state_dir: Path) -> AlertRunner | None:
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
    except (OSError, OutboxError) as exc:
        raise ConfigError(f"alerting.outbox_path {path}: {exc}") from None
    if saved is not None:
        try:
            lifecycle.load(saved)
        except ValueError as exc:
            # A damaged snapshot must not stop monitoring: start afresh, keep the file.
            log.warning("alert state in %s not restored: %s", path, exc)
    try:
        dispatcher = Dispatcher(outbox, dests, resend_interval_s=cfg.alerting.resend_interval_s)
    except ValueError as exc:
        raise ConfigError(f"alerting: {exc}") from None
    runner = AlertRunner(lifecycle, outbox, dispatcher)
    dispatcher.start()
    return runner
