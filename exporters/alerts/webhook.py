"""Generic JSON webhook delivery, schema ``lightwarden.alert.v1`` (see exporters/alerts/README.md).

One event per request, strictly in order per destination: event n+1 is not sent before
the receiver accepted event n. Each request carries ``Idempotency-Key: <key>:<sequence>``
so a receiver can drop the rare repeat (a reply lost after it had accepted). With a
secret configured the body is signed: ``X-Lightwarden-Signature: sha256=<hex>`` is the
HMAC-SHA256 of ``<timestamp>.<raw body>`` with the timestamp from
``X-Lightwarden-Timestamp`` (Unix seconds), so a captured request cannot be replayed
later with a fresh timestamp.
"""

from __future__ import annotations

import hashlib
import hmac
import json
from collections.abc import Sequence
from typing import Any

from lightwarden.exporters.alerts.http import AlertDestination, post
from lightwarden.exporters.alerts.outbox import event_to_dict
from lightwarden.exporters.alerts.wording import alert_labels, describe, rfc3339, stale_note
from lightwarden.rules.findings import AlertEvent, AlertKind

SCHEMA = "lightwarden.alert.v1"
SIGNATURE_HEADER = "X-Lightwarden-Signature"
TIMESTAMP_HEADER = "X-Lightwarden-Timestamp"
IDEMPOTENCY_HEADER = "Idempotency-Key"
# What a receiver should accept between our timestamp and its clock (documented).
REPLAY_TOLERANCE_S = 300


def idempotency_key(event: AlertEvent) -> str:
    return f"{event.key}:{event.sequence}"


def to_webhook(
    event: AlertEvent, now: float, static_labels: dict[str, str] | None = None
) -> dict[str, Any]:
    """The ``lightwarden.alert.v1`` document for one event."""
    times: dict[str, str | None] = {
        "starts_at": rfc3339(event.starts_at), "at": rfc3339(event.at)}
    times["ends_at"] = rfc3339(event.ends_at) if event.ends_at is not None else None
    doc: dict[str, Any] = {
        "schema": SCHEMA,
        "idempotency_key": idempotency_key(event),
        "event": event.kind.value,
        "sent_at": rfc3339(now),
        "labels": alert_labels(event, static_labels),
        "description": describe(event),
        "stale_note": stale_note(event) if event.kind is AlertKind.STALE else None,
        "times": times,
        "alert": event_to_dict(event),
    }
    return doc


def sign(secret: str, timestamp: str, body: bytes) -> str:
    """Header value ``sha256=<hex>`` over ``<timestamp>.<body>``."""
    mac = hmac.new(secret.encode("utf-8"), timestamp.encode("ascii") + b"." + body, hashlib.sha256)
    return "sha256=" + mac.hexdigest()


def verify(
    secret: str,
    timestamp: str,
    body: bytes,
    signature: str,
    now: float,
    tolerance_s: float = REPLAY_TOLERANCE_S,
) -> bool:
    """Receiver-side check (reference for integrators; used by our tests' receiver too)."""
    try:
        ts = int(timestamp)
    except ValueError:
        return False
    if abs(now - ts) > tolerance_s:
        return False
    return hmac.compare_digest(sign(secret, timestamp, body), signature)


class WebhookSender:
    """Posts one event per request to one webhook, signing when a secret is set."""

    batch_limit = 1
    in_order_one_at_a_time = True

    def __init__(self, destination: AlertDestination) -> None:
        if destination.kind != "webhook":
            raise ValueError(f"not a webhook destination: {destination!r}")
        self.destination = destination

    def request(self, event: AlertEvent, now: float) -> tuple[bytes, dict[str, str]]:
        """Body and headers for one attempt (the timestamp is fresh on every retry)."""
        body = json.dumps(
            to_webhook(event, now, self.destination.static_labels),
            allow_nan=False,
            sort_keys=True,
            separators=(",", ":"),
        ).encode("utf-8")
        ts = str(int(now))
        headers = {IDEMPOTENCY_HEADER: idempotency_key(event), TIMESTAMP_HEADER: ts}
        if self.destination.secret:
            headers[SIGNATURE_HEADER] = sign(self.destination.secret, ts, body)
        return body, headers

    def send(self, events: Sequence[AlertEvent], now: float) -> None:
        for ev in events:  # the dispatcher hands one at a time; a loop keeps order anyway
            body, headers = self.request(ev, now)
            post(
                self.destination.url,
                body,
                headers,
                self.destination.timeout_s,
                self.destination.ca_file,
            )
