"""AlertEvent to a plain JSON-safe dict and back: the one place its members become words.

Outbox rows, the delivery state, webhook bodies and lifecycle snapshots all hold this
dict, so they agree on it by construction. The words are the ones events have always
carried (kind "open", severity "warning", quantity "rx_power", condition
"near_overload", window source "pmd-table"), so rows and snapshots written before the
event was typed read back unchanged.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Mapping
from enum import Enum
from typing import Any

from lightwarden.collector.readings import Quantity
from lightwarden.rules.findings import (
    AlertEvent,
    AlertKind,
    AlertSeverity,
    Condition,
    WindowSource,
)

FIELDS = tuple(f.name for f in dataclasses.fields(AlertEvent))
REQUIRED = frozenset(
    f.name
    for f in dataclasses.fields(AlertEvent)
    if f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING
)


#: Fields only a link finding's event carries (rules/link_alerts.py).
_LINK_FIELDS = ("finding", "far_device", "far_port")


def _member(what: str, enum: type[AlertKind] | type[AlertSeverity]) -> Callable[[object], Enum]:
    members: dict[str, Enum] = {m.value: m for m in enum}

    def parse(word: object) -> Enum:
        found = members.get(word) if isinstance(word, str) else None
        if found is None:
            raise ValueError(f"{what} {word!r} is not one of {sorted(members)}")
        return found

    return parse


_PARSE: dict[str, Callable[[object], Enum]] = {
    "kind": _member("kind", AlertKind),
    "severity": _member("severity", AlertSeverity),
    "quantity": Quantity.from_label,
    "condition": Condition.from_word,
    "window_source": WindowSource.from_word,
}


def event_to_dict(event: AlertEvent) -> dict[str, Any]:
    """Field name to value, members as their words; non-finite numbers become None."""
    out: dict[str, Any] = {}
    for name in FIELDS:
        v = getattr(event, name)
        if isinstance(v, float) and not math.isfinite(v):
            v = None  # JSON has no NaN
        out[name] = v
    out.update(
        kind=event.kind.value,
        severity=event.severity.value,
        quantity=None if event.quantity is None else event.quantity.label,
        condition=None if event.condition is None else event.condition.word,
        window_source=event.window_source.word,
    )
    if not event.finding:
        # A reading's event is written exactly as before link findings existed.
        for name in _LINK_FIELDS:
            del out[name]
    return out


def event_from_dict(data: Mapping[str, Any], where: str = "alert event") -> AlertEvent:
    """Rebuild an event from ``event_to_dict`` output; ValueError names the bad field."""
    if not isinstance(data, Mapping):
        raise ValueError(f"{where}: expected a mapping, got {type(data).__name__}")
    unknown = set(data) - set(FIELDS)
    if unknown:
        raise ValueError(f"{where}: unknown fields {sorted(unknown)}")
    missing = REQUIRED - set(data)
    if missing:
        raise ValueError(f"{where}: missing fields {sorted(missing)}")
    values = dict(data)
    for name, parse in _PARSE.items():
        if values[name] is None and values.get("finding") and name in ("quantity", "condition"):
            continue  # a link finding is about no one reading
        try:
            values[name] = parse(values[name])
        except ValueError as exc:
            raise ValueError(f"{where}.{name}: {exc}") from None
    return AlertEvent(**values)
