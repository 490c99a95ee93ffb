"""Alertmanager v2 delivery: AlertEvent -> ``POST /api/v2/alerts``.

Every open alert carries an explicit ``endsAt`` a few resend intervals ahead and is
re-sent every interval, so a live monitor keeps it open while a dead one lets it expire
instead of leaving it stuck. A resolve sends ``endsAt`` at the resolve time. Labels are
identical across monitor instances (see ``alert_format.alert_labels``), so an HA pair
dedupes in Alertmanager.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

from lightwarden.exporters.alerts.http import AlertDestination, post
from lightwarden.exporters.alerts.wording import alert_labels, describe, rfc3339, stale_note
from lightwarden.rules.findings import AlertEvent, AlertKind

API_PATH = "/api/v2/alerts"
DEFAULT_RESEND_INTERVAL_S = 60.0
# How many resend intervals an open alert outlives its last send: enough to ride out a
# couple of missed resends, short enough that a dead monitor's alerts clear in minutes.
EXPIRY_INTERVALS = 4


def alerts_url(base: str) -> str:
    """The alerts endpoint for a destination URL given either as base or full path."""
    trimmed = base.rstrip("/")
    return trimmed if trimmed.endswith(API_PATH) else trimmed + API_PATH


def to_alertmanager(
    event: AlertEvent,
    now: float,
    resend_interval_s: float = DEFAULT_RESEND_INTERVAL_S,
    static_labels: dict[str, str] | None = None,
    generator_url: str = "",
) -> dict[str, Any]:
    """One postable alert (Alertmanager v2 schema) for ``event`` as of ``now``."""
    annotations = {
        "summary": event.summary,
        "description": describe(event),
        "advice": event.advice,
    }
    if event.caution:
        annotations["caution"] = event.caution
    if event.kind is AlertKind.STALE:
        annotations["stale"] = stale_note(event)
    if event.kind is AlertKind.RESOLVE:
        ends = event.ends_at if event.ends_at is not None else (event.at or now)
        # An endsAt still in Alertmanager's future does not resolve: it merges with the
        # open alert and the later endsAt of our last re-send wins, so the alert would
        # linger minutes. Never send a resolve later than the moment of sending.
        ends = min(ends, now)
    else:
        ends = now + EXPIRY_INTERVALS * resend_interval_s
    # Alertmanager rejects endsAt before startsAt.
    ends = max(ends, event.starts_at)
    alert: dict[str, Any] = {
        "labels": alert_labels(event, static_labels),
        "annotations": {k: v for k, v in annotations.items() if v},
        "startsAt": rfc3339(event.starts_at),
        "endsAt": rfc3339(ends),
    }
    if generator_url:
        alert["generatorURL"] = optic_url(generator_url, event)
    return alert


def optic_url(template: str, event: AlertEvent) -> str:
    """The alert's link: ``template`` with {device}, {port}, {lane}, {quantity} filled in
    (URL-quoted), e.g. ``http://mon:9817/optic/{device}/{port}?lane={lane}``; a template
    without placeholders is used as it is."""
    from urllib.parse import quote

    # A link finding's link goes to its (A end) optic; it has no lane or quantity.
    fields = {"device": event.device, "port": event.port, "lane": str(event.lane),
              "quantity": "" if event.quantity is None else event.quantity.label}
    out = template
    for name, value in fields.items():
        out = out.replace("{" + name + "}", quote(value, safe=""))
    return out


def latest_per_key(events: Sequence[AlertEvent]) -> list[AlertEvent]:
    """Keep the newest step of each alert, in first-seen order.

    Alertmanager holds state, not history: posting open then resolve for one label set in
    one request would leave the outcome to its merge rules; sending only the newest step
    is what a reader of the batch meant.
    """
    newest: dict[str, AlertEvent] = {}
    for ev in events:
        cur = newest.get(ev.key)
        if cur is None or ev.sequence >= cur.sequence:
            newest[ev.key] = ev
    return list(newest.values())


class AlertmanagerSender:
    """Posts batches of events (and periodic re-sends of open alerts) to one Alertmanager."""

    batch_limit = 200
    in_order_one_at_a_time = False

    def __init__(
        self, destination: AlertDestination, resend_interval_s: float = DEFAULT_RESEND_INTERVAL_S
    ) -> None:
        if destination.kind != "alertmanager":
            raise ValueError(f"not an alertmanager destination: {destination!r}")
        if resend_interval_s <= 0:
            raise ValueError("resend_interval_s must be > 0")
        self.destination = destination
        self.resend_interval_s = resend_interval_s
        self._url = alerts_url(destination.url)

    def payload(self, events: Sequence[AlertEvent], now: float) -> bytes:
        alerts = [
            to_alertmanager(
                ev,
                now,
                self.resend_interval_s,
                self.destination.static_labels,
                self.destination.generator_url,
            )
            for ev in latest_per_key(events)
        ]
        return json.dumps(alerts, allow_nan=False).encode("utf-8")

    def send(self, events: Sequence[AlertEvent], now: float) -> None:
        """POST the events; raises DeliveryError when Alertmanager did not accept them."""
        if not events:
            return
        post(
            self._url,
            self.payload(events, now),
            {},
            self.destination.timeout_s,
            self.destination.ca_file,
        )
