"""Consistency findings to alert events: open when first seen, update when the words or the
severity change, resolve when gone.

A finding is a fact about parts and plant records, not a creeping level, so there is no
hold: it opens on the poll that first shows it and resolves on the first poll of one of
its devices that no longer shows it. A device that does not answer changes nothing (no
evidence either way). The events are ordinary ``AlertEvent``s with ``finding`` set, so
the outbox, Alertmanager and webhook delivery carry them unchanged; the state is plain
data that round-trips through a JSON-safe dict, like the reading lifecycle's.
"""

from __future__ import annotations

from collections.abc import Collection, Iterable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

from lightwarden.rules.advice import LASER_CAUTION
from lightwarden.rules.consistency import ALERTNAME, Finding, Mismatch
from lightwarden.rules.event_codec import event_from_dict, event_to_dict
from lightwarden.rules.findings import AlertEvent, AlertKind, WindowSource


def finding_event(f: Finding, kind: AlertKind, sequence: int, starts_at: float,
                  now: float) -> AlertEvent:
    return AlertEvent(
        kind=kind, key=f.key, sequence=sequence, alertname=ALERTNAME,
        severity=f.severity.alert, device=f.device, port=f.port, lane=0, quantity=None,
        condition=None, value=None, unit="", edge_name="", edge_value=None,
        window_source=WindowSource.NONE, margin_db=None, rate_per_day=None, summary=f.text,
        # Every finding's advice means fitting or swapping optics, or re-patching.
        advice=f.advice, caution=LASER_CAUTION, starts_at=starts_at, at=now, finding=f.kind.value,
        far_device=f.far_device, far_port=f.far_port,
    )


@dataclass(slots=True)
class LinkAlerts:
    """Open link-finding alerts by key, and the last sequence number used per key."""

    open: dict[str, AlertEvent] = field(default_factory=dict)
    sequences: dict[str, int] = field(default_factory=dict)

    FORMAT = "lightwarden.link-alerts/1"

    def _next(self, key: str) -> int:
        seq = self.sequences.get(key, 0) + 1
        self.sequences[key] = seq
        return seq

    def observe(self, findings: Iterable[Finding], devices: Collection[str],
                now: float) -> list[AlertEvent]:
        """Feed the findings involving ``devices`` (those just polled); open alerts about
        those devices that are not among them resolve."""
        events: list[AlertEvent] = []
        seen: set[str] = set()
        for f in findings:
            seen.add(f.key)
            last = self.open.get(f.key)
            if last is None:
                ev = finding_event(f, AlertKind.OPEN, self._next(f.key), now, now)
            elif (last.severity, last.summary, last.advice) != (f.severity.alert, f.text,
                                                                 f.advice):
                ev = finding_event(f, AlertKind.UPDATE, self._next(f.key), last.starts_at, now)
            else:
                continue
            self.open[f.key] = ev
            events.append(ev)
        for key, last in list(self.open.items()):
            if key in seen or not (last.device in devices or last.far_device in devices):
                continue
            del self.open[key]
            events.append(replace(
                last, kind=AlertKind.RESOLVE, sequence=self._next(key),
                summary=f"Resolved: {last.summary}", advice="", caution="", ends_at=now,
                at=now))
        return events

    def open_alerts(self) -> list[AlertEvent]:
        return [self.open[k] for k in sorted(self.open)]

    def to_dict(self) -> dict[str, Any]:
        return {"format": self.FORMAT,
                "open": {k: event_to_dict(e) for k, e in self.open.items()},
                "sequences": dict(self.sequences)}

    def load(self, snapshot: Mapping[str, Any]) -> None:
        """Take up a saved state in place (after a restart); ValueError names the damage."""
        restored = LinkAlerts.from_dict(snapshot)
        self.open, self.sequences = restored.open, restored.sequences

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> LinkAlerts:
        """Rebuild from ``to_dict`` output; ValueError names what is damaged."""
        where = "link alert snapshot"
        if not isinstance(data, Mapping) or data.get("format") != cls.FORMAT:
            raise ValueError(f"{where}: expected format {cls.FORMAT!r}")
        state = cls()
        seqs, opened = data.get("sequences", {}), data.get("open", {})
        if not isinstance(seqs, Mapping) or not isinstance(opened, Mapping):
            raise ValueError(f"{where}: 'open' and 'sequences' must be mappings")
        for key, seq in seqs.items():
            if isinstance(seq, bool) or not isinstance(seq, int) or seq < 0:
                raise ValueError(f"{where}: sequences[{key!r}] must be an integer >= 0")
            state.sequences[str(key)] = seq
        for key, raw in opened.items():
            ev = event_from_dict(raw, f"{where}: open[{key!r}]")
            try:
                Mismatch(ev.finding)
            except ValueError:
                raise ValueError(f"{where}: open[{key!r}]: unknown finding {ev.finding!r}"
                                 ) from None
            state.open[str(key)] = ev
            state.sequences[str(key)] = max(state.sequences.get(str(key), 0), ev.sequence)
        return state
