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
from lightwarden.rules.findings import AlertEvent
from lightwarden.rules.lifecycle import AlertLifecycle
from lightwarden.rules.link_alerts import LinkAlerts

log = logging.getLogger("lightwarden.alerting")

LIFECYCLE_STATE = "lifecycle"
LINK_ALERTS_STATE = "link-alerts"


class AlertRunner:
    """Hands each poll's events to delivery and saves the lifecycle beside them."""

    def __init__(self, lifecycle: AlertLifecycle, outbox: Outbox, dispatcher: Dispatcher,
                 links: LinkAlerts | None = None) -> None:
        self.lifecycle = lifecycle
        self.outbox = outbox
        self.dispatcher = dispatcher
        self.links = links

    def _save(self) -> None:
        self.outbox.save_state(LIFECYCLE_STATE, self.lifecycle.snapshot())
        if self.links is not None:
            self.outbox.save_state(LINK_ALERTS_STATE, self.links.to_dict())

    def submit(self, events: list[AlertEvent]) -> None:
        self.dispatcher.submit(events)
        self._save()

    def stop(self, drain_timeout: float = 5.0) -> None:
        self.dispatcher.stop(drain_timeout)
        self._save()
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


def start_alerting(lifecycle: AlertLifecycle, cfg: SiteConfig,
                   base_dir: Path, links: LinkAlerts | None = None) -> AlertRunner | None:
    """Restore the lifecycle's saved state and start delivery; None when no destination
    is configured."""
    dests = destinations(cfg, base_dir)
    if not dests:
        return None
    path = Path(cfg.alerting.outbox_path)
    if not path.is_absolute():
        path = base_dir / path
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
    try:
        dispatcher = Dispatcher(outbox, dests, resend_interval_s=cfg.alerting.resend_interval_s)
    except ValueError as exc:
        raise ConfigError(f"alerting: {exc}") from None
    runner = AlertRunner(lifecycle, outbox, dispatcher, links)
    dispatcher.start()
    return runner
