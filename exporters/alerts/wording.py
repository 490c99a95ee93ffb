"""Words and times shared by the Alertmanager and webhook payloads."""

from __future__ import annotations

import math
from datetime import UTC, datetime

from lightwarden.rules.findings import AlertEvent


def rfc3339(epoch_s: float) -> str:
    """UTC RFC 3339 with milliseconds, e.g. ``2024-05-01T12:00:00.000Z``."""
    return (
        datetime.fromtimestamp(epoch_s, UTC)
        .isoformat(timespec="milliseconds")
        .replace("+00:00", "Z")
    )


def alert_labels(event: AlertEvent, static: dict[str, str] | None = None) -> dict[str, str]:
    """The identity of an alert as label pairs: the same on every monitor instance.

    No instance/host label on purpose: two monitors watching the same optic must send the
    same label set so Alertmanager keeps one alert.
    """
    labels = dict(static or {})
    if event.finding or event.quantity is None:
        # A link finding: the same labels as the generated rule's (alert_rules.py).
        # An empty far end is left out: Prometheus has no empty-valued labels.
        labels.update(alertname=event.alertname, severity=event.severity.value,
                      device=event.device, port=event.port, kind=event.finding)
        if event.far_device:
            labels.update(far_device=event.far_device, far_port=event.far_port)
        return labels
    labels.update(
        alertname=event.alertname,
        severity=event.severity.value,
        device=event.device,
        port=event.port,
        lane=str(event.lane),
        quantity=event.quantity.label,
    )
    return labels


def _num(v: float | None) -> float | None:
    return v if v is not None and math.isfinite(v) else None


def _rate_unit(unit: str) -> str:
    # A change of a dBm level is a ratio, so its rate is in dB per day.
    return "dB/day" if unit == "dBm" else f"{unit}/day"


def describe(event: AlertEvent) -> str:
    """One line with the numbers behind the alert: value, edge, window source, margin, rate."""
    parts: list[str] = []
    if event.quantity is None or event.condition is None:
        far = f" facing {event.far_device} {event.far_port}" if event.far_device else ""
        return f"{event.finding} on {event.device} {event.port}{far}"
    quantity, source = event.quantity.label, event.window_source.word
    value = _num(event.value)
    # Optical levels to 0.1 dB (the resolution a reading is worth); volts to 0.01 V.
    prec = 2 if event.unit == "V" else 1
    parts.append(
        f"{quantity} {value:.{prec}f} {event.unit}"
        if value is not None
        else f"{quantity} has no usable value"
    )
    edge = _num(event.edge_value)
    name = event.edge_name.replace("_", " ")
    if edge is not None:
        parts.append(f"{name} edge {edge:.{prec}f} {event.unit} (from {source})")
    elif event.edge_name:
        parts.append(f"{name} edge unknown (from {source})")
    margin = _num(event.margin_db)
    if margin is not None:
        parts.append(f"margin {margin:.1f} dB")
    rate = _num(event.rate_per_day)
    if rate is not None:
        parts.append(f"moving {rate:+.2f} {_rate_unit(event.unit)}")
    parts.append(f"condition {event.condition.word}")
    return "; ".join(parts)


def stale_note(event: AlertEvent) -> str:
    return (
        f"Data is stale since {rfc3339(event.at)}: no fresh reading for this optic, so the "
        "alert stays open on its last known value until readings resume."
    )
