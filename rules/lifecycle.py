"""Alert lifecycle: from a device's stream of Assessments to open/update/stale/resolve events.

The row ``condition`` an Assessment carries has already been through hysteresis and
hold times (rules/hysteresis.py); this module adds what only an alert needs: a hold
before opening and before resolving, a step below which a moving value is not worth an
update, a separate "stale" state for devices that stopped answering, and a per-key
sequence so that (key, sequence) is an idempotency key for delivery. The state is plain
data and round-trips through a JSON-safe dict, so a restarted service neither reopens
nor duplicates alerts. States and transitions: DEVELOPERS.md, "Alert lifecycle".
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch
from lightwarden.rules.advice import (
    AdviceContext,
    advise,
    resolved_summary,
    summarize,
)
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.event_codec import FIELDS, REQUIRED, event_from_dict, event_to_dict
from lightwarden.rules.findings import (
    SEVERITY_OF,
    AlertEvent,
    AlertKind,
    Assessment,
    Condition,
    Edge,
    Severity,
    WindowSource,
    alert_key,
    split_alert_key,
)

# Phases of one key's track (see DEVELOPERS.md for the table).
PENDING = "pending"  # condition seen, open hold running, nothing sent yet
FIRING = "firing"  # open sent, condition present
CLEARING = "clearing"  # open sent, condition gone, resolve hold running
STALE_PHASE = "stale"  # open sent, device stopped answering
STALE_CLEARING = "stale-clearing"  # device back after stale with the condition gone
PHASES = frozenset({PENDING, FIRING, CLEARING, STALE_PHASE, STALE_CLEARING})

ALERTNAMES: dict[Condition, str] = {
    Condition.NEAR_OVERLOAD: "OpticRxNearOverload",
    Condition.NEAR_SENSITIVITY: "OpticRxNearSensitivity",
    Condition.OVERLOADED: "OpticRxOverloaded",
    Condition.BELOW_SENSITIVITY: "OpticRxBelowSensitivity",
    Condition.DARK: "OpticDark",
    Condition.WARNING: "OpticThresholdWarning",
    Condition.ALARM: "OpticThresholdAlarm",
    Condition.LASER_OFF: "OpticLaserOff",
    Condition.OFF_STANDARD: "OpticTxOffStandard",
    Condition.TX_FAULT: "OpticTxFault",
    Condition.LOSS_OF_SIGNAL: "OpticLossOfSignal",
    Condition.NOT_READY: "OpticModuleNotReady",
    Condition.LATCHED_ALARM: "OpticLatchedAlarm",
    Condition.LANE_IMBALANCE: "OpticLaneImbalance",
}

#: Conditions that raise an alert: severity warning or critical.
_ALERTING = SEVERITY_OF >= Severity.WARNING

#: Default update steps: how far a value (or its margin) must move, in the quantity's
#: unit, before an open alert is worth an update. Power in dB; the others are our
#: choice, a little above DDM accuracy (SFF-8472: +-3 C, +-3 % Vcc, +-10 % bias; memory).
DEFAULT_UPDATE_STEPS: dict[Quantity, float] = {
    Quantity.RX_POWER: 1.0,
    Quantity.TX_POWER: 1.0,
    Quantity.BIAS: 2.0,
    Quantity.TEMPERATURE: 3.0,
    Quantity.SUPPLY: 0.1,
}


@dataclass(slots=True, frozen=True)
class HoldPolicy:
    """Alert-level holds and update step for one (quantity, lane)."""

    open_hold_s: float = 0.0
    resolve_hold_s: float = 0.0
    gone_hold_s: float = 300.0
    update_step: float = 1.0

    def __post_init__(self) -> None:
        for name in ("open_hold_s", "resolve_hold_s", "gone_hold_s"):
            v = getattr(self, name)
            if not math.isfinite(v) or v < 0:
                raise ValueError(f"lifecycle policy: {name} must be a number >= 0, got {v!r}")
        if not math.isfinite(self.update_step) or self.update_step <= 0:
            raise ValueError(
                f"lifecycle policy: update_step must be a number > 0, got {self.update_step!r}"
            )


@dataclass(slots=True, frozen=True)
class PolicyOverride:
    """Part of a HoldPolicy; fields left None keep the wider setting."""

    open_hold_s: float | None = None
    resolve_hold_s: float | None = None
    gone_hold_s: float | None = None
    update_step: float | None = None


@dataclass(slots=True)
class LifecycleConfig:
    """Holds and steps: site-wide, then per quantity, then per (quantity, lane).

    Defaults: the row ``condition`` has already waited out its own hold and hysteresis
    (rules/hysteresis.py: 120 s to adopt, 300 s to clear), so alert-level open and
    resolve holds default to 0 s: hold times live in one place, and a second hold only
    delays the page. They exist for sites that want alerts slower than conditions.
    The one thing only the lifecycle sees is a row that vanished from a device that
    still answers (optic pulled, port renamed, a partial reply): that resolves after
    ``gone_hold_s`` = 300 s (five polls at 60 s), so one short reply does not resolve
    and reopen every alert on the device.
    """

    open_hold_s: float = 0.0
    resolve_hold_s: float = 0.0
    gone_hold_s: float = 300.0
    update_steps: dict[Quantity, float] = field(default_factory=lambda: dict(DEFAULT_UPDATE_STEPS))
    per_quantity: dict[Quantity, PolicyOverride] = field(default_factory=dict)
    per_lane: dict[tuple[Quantity, int], PolicyOverride] = field(default_factory=dict)
    targets: MarginTargets = field(default_factory=MarginTargets)
    _cache: dict[tuple[int, int], HoldPolicy] = field(default_factory=dict, repr=False)

    def policy(self, quantity: Quantity, lane: int) -> HoldPolicy:
        cache_key = (int(quantity), lane)
        found = self._cache.get(cache_key)
        if found is not None:
            return found
        values = {
            "open_hold_s": self.open_hold_s,
            "resolve_hold_s": self.resolve_hold_s,
            "gone_hold_s": self.gone_hold_s,
            "update_step": self.update_steps.get(Quantity(quantity), 1.0),
        }
        for override in (self.per_quantity.get(quantity), self.per_lane.get((quantity, lane))):
            if override is not None:
                for name in values:
                    v = getattr(override, name)
                    if v is not None:
                        values[name] = v
        try:
            found = HoldPolicy(**values)
        except ValueError as exc:
            raise ValueError(f"{exc} (for {Quantity(quantity).label} lane {lane})") from None
        self._cache[cache_key] = found
        return found


@dataclass(slots=True)
class Track:
    """What the lifecycle remembers about one key."""

    device: str
    phase: str
    condition: Condition
    since: float  # first seen (pending since); the alert's starts_at
    clear_since: float | None = None  # first clear observation of the current clear run
    last: AlertEvent | None = None  # last event sent; None while pending


@dataclass(slots=True)
class LifecycleState:
    """Every open or pending alert, and the last sequence number used per key.

    Sequences outlive their alerts: a key that alerts again continues its count, so
    (key, sequence) never repeats.
    """

    tracks: dict[str, Track] = field(default_factory=dict)
    sequences: dict[str, int] = field(default_factory=dict)
    _by_device: dict[str, set[str]] = field(default_factory=dict, repr=False)

    def keys_for(self, device: str) -> set[str]:
        return self._by_device.get(device, set())

    def add(self, key: str, track: Track) -> None:
        self.tracks[key] = track
        self._by_device.setdefault(track.device, set()).add(key)

    def drop(self, key: str) -> None:
        track = self.tracks.pop(key)
        keys = self._by_device.get(track.device)
        if keys is not None:
            keys.discard(key)
            if not keys:
                del self._by_device[track.device]

    def next_sequence(self, key: str) -> int:
        seq = self.sequences.get(key, 0) + 1
        self.sequences[key] = seq
        return seq

    # --- persistence ------------------------------------------------------------------

    # Still /1: fields are written as words (rules/event_codec.py), the same words the
    # untyped events held, so snapshots from before the typed events read back as they are.
    FORMAT = "lightwarden.lifecycle/1"

    def to_dict(self) -> dict[str, Any]:
        """A JSON-safe snapshot (str keys; numbers, strings, None, lists, dicts)."""
        return {
            "format": self.FORMAT,
            "tracks": {
                key: {
                    "device": t.device,
                    "phase": t.phase,
                    "condition": t.condition.word,
                    "since": t.since,
                    "clear_since": t.clear_since,
                    "last": None if t.last is None else event_to_dict(t.last),
                }
                for key, t in self.tracks.items()
            },
            "sequences": dict(self.sequences),
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> LifecycleState:
        """Rebuild a state from ``to_dict`` output; a clear ValueError names what is wrong."""
        where = "lifecycle snapshot"
        if not isinstance(data, Mapping):
            raise ValueError(f"{where}: expected a mapping, got {type(data).__name__}")
        if data.get("format") != cls.FORMAT:
            raise ValueError(f"{where}: format is {data.get('format')!r}, expected {cls.FORMAT!r}")
        state = cls()
        sequences = data.get("sequences", {})
        if not isinstance(sequences, Mapping):
            raise ValueError(f"{where}: 'sequences' must be a mapping")
        for key, seq in sequences.items():
            if (
                not isinstance(key, str)
                or isinstance(seq, bool)
                or not isinstance(seq, int)
                or seq < 0
            ):
                raise ValueError(
                    f"{where}: sequences[{key!r}] must be an integer >= 0, got {seq!r}"
                )
            state.sequences[key] = seq
        tracks = data.get("tracks", {})
        if not isinstance(tracks, Mapping):
            raise ValueError(f"{where}: 'tracks' must be a mapping")
        for key, raw in tracks.items():
            track = _track_from_dict(f"{where}: tracks[{key!r}]", raw)
            state.add(str(key), track)
            # Never hand out a sequence the receiver has already seen for this key.
            sent = 0 if track.last is None else track.last.sequence
            state.sequences[str(key)] = max(state.sequences.get(str(key), 0), sent)
        return state


_EVENT_FIELDS = frozenset(FIELDS)


def _track_from_dict(where: str, raw: Any) -> Track:
    if not isinstance(raw, Mapping):
        raise ValueError(f"{where}: expected a mapping")
    phase = raw.get("phase")
    if phase not in PHASES:
        raise ValueError(f"{where}.phase: unknown phase {phase!r}")
    try:
        condition = Condition.from_word(raw.get("condition"))
    except ValueError as exc:
        raise ValueError(f"{where}.condition: {exc}") from None
    since = raw.get("since")
    clear_since = raw.get("clear_since")
    if not isinstance(since, int | float) or isinstance(since, bool):
        raise ValueError(f"{where}.since: expected epoch seconds, got {since!r}")
    if clear_since is not None and not isinstance(clear_since, int | float):
        raise ValueError(
            f"{where}.clear_since: expected epoch seconds or null, got {clear_since!r}"
        )
    last_raw = raw.get("last")
    last = None
    if last_raw is not None:
        # Fields with defaults may be missing: snapshots from before they were added.
        if not isinstance(last_raw, Mapping) or not REQUIRED <= set(last_raw) <= _EVENT_FIELDS:
            raise ValueError(
                f"{where}.last: expected an alert event with fields {sorted(_EVENT_FIELDS)}"
            )
        last = event_from_dict(last_raw, f"{where}.last")
    if phase != PENDING and last is None:
        raise ValueError(f"{where}: phase {phase!r} needs the last event sent")
    device = raw.get("device")
    if not isinstance(device, str) or not device:
        raise ValueError(f"{where}.device: expected a device name")
    return Track(device, phase, condition, float(since), clear_since, last)


def _opt(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


class AlertLifecycle:
    """Turns Assessments into AlertEvents, one device at a time, with time passed in."""

    def __init__(self, config: LifecycleConfig | None = None, state: LifecycleState | None = None):
        self.config = config if config is not None else LifecycleConfig()
        self.state = state if state is not None else LifecycleState()

    @classmethod
    def restore(
        cls, snapshot: Mapping[str, Any], config: LifecycleConfig | None = None
    ) -> AlertLifecycle:
        return cls(config, LifecycleState.from_dict(snapshot))

    def snapshot(self) -> dict[str, Any]:
        return self.state.to_dict()

    def load(self, snapshot: Mapping[str, Any]) -> None:
        """Take up a saved state (after a restart); ValueError names what is damaged."""
        self.state = LifecycleState.from_dict(snapshot)

    def open_alerts(self) -> list[AlertEvent]:
        """The last event sent for every alert not yet resolved, ordered by key.

        The lifecycle is the one owner of open alerts: pages, metrics and the check
        command all read them here.
        """
        # A copy first: HTTP threads read this while the poller changes the state.
        tracks = list(self.state.tracks.items())
        return [t.last for _k, t in sorted(tracks) if t.last is not None]

    # --- input ---------------------------------------------------------------------

    def observe(
        self,
        assessment: Assessment,
        now: float,
        context: Mapping[tuple[str, int, Quantity], AdviceContext] | None = None,
    ) -> list[AlertEvent]:
        """Feed one device's Assessment. ``context`` adds history facts to the advice,
        keyed by (port, lane, quantity)."""
        batch = assessment.batch
        _check_aligned(assessment)
        if not math.isfinite(now):
            raise ValueError(
                f"lifecycle for {batch.device}: now must be epoch seconds, got {now!r}"
            )
        cond = assessment.condition.astype(np.intp, copy=False)
        if cond.size and (cond.min() < 0 or cond.max() >= len(Condition)):
            raise ValueError(f"lifecycle for {batch.device}: condition codes out of range")
        alerting = _ALERTING[cond].copy()
        if assessment.cause:
            # A row explained by another (the zero bias of a laser that is off, the dark
            # receiver it feeds) raises no alert of its own: one cause, one alert.
            alerting[list(assessment.cause)] = False
        severity = SEVERITY_OF[cond]
        device = batch.device
        tracked = self.state.keys_for(device)
        rows = np.flatnonzero(alerting | _tracked_rows(batch, tracked) if tracked else alerting)
        row_of: dict[str, int] = {}
        for i in map(int, rows):
            key = _row_key(batch, i)
            j = row_of.get(key)
            if j is None or severity[i] > severity[j]:
                row_of[key] = i
        events: list[AlertEvent] = []
        for key, i in row_of.items():
            if alerting[i]:
                self._bad(key, i, assessment, now, context, events)
        for key in list(tracked):
            row = row_of.get(key)
            if row is None:
                self._clear(key, None, assessment, now, events)  # the optic is gone
            elif not alerting[row] and cond[row] != Condition.UNKNOWN:
                self._clear(key, row, assessment, now, events)
            # UNKNOWN: no evidence either way; the track waits as it is.
        return events

    def mark_stale(self, device: str, now: float) -> list[AlertEvent]:
        """Call when a poll of ``device`` failed. Open alerts become stale (not resolved);
        pending ones are dropped, since their hold can no longer be confirmed."""
        events: list[AlertEvent] = []
        for key in list(self.state.keys_for(device)):
            track = self.state.tracks[key]
            if track.phase == PENDING:
                self.state.drop(key)
                continue
            if track.phase == STALE_PHASE:
                continue
            was_stale = track.phase == STALE_CLEARING
            track.phase = STALE_PHASE
            track.clear_since = None  # a clear run must be continuous observations
            if was_stale:
                continue
            assert track.last is not None
            last = track.last
            event = replace(
                last,
                kind=AlertKind.STALE,
                sequence=self.state.next_sequence(key),
                summary=f"No answer from {device}; last known: {_last_summary(last)}",
                at=now,
            )
            track.last = event
            events.append(event)
        return events

    def retire(self, device: str, now: float) -> list[AlertEvent]:
        """Call when ``device`` was taken out of the config: every open alert of it is
        resolved ("no longer reported by"), pending ones are dropped."""
        events: list[AlertEvent] = []
        for key in list(self.state.keys_for(device)):
            track = self.state.tracks[key]
            last = track.last
            if track.phase != PENDING and last is not None:
                # the reading lifecycle's own events always name a quantity and condition
                assert last.quantity is not None and last.condition is not None
                events.append(replace(
                    last,
                    kind=AlertKind.RESOLVE,
                    sequence=self.state.next_sequence(key),
                    value=None,
                    margin_db=None,
                    summary=resolved_summary(last.quantity, last.port, last.lane, None,
                                             last.condition, gone_from=device),
                    advice="",
                    caution="",
                    ends_at=now,
                    at=now,
                ))
            self.state.drop(key)
        return events

    # --- transitions -----------------------------------------------------------------

    def _bad(
        self,
        key: str,
        i: int,
        assessment: Assessment,
        now: float,
        context: Mapping[tuple[str, int, Quantity], AdviceContext] | None,
        events: list[AlertEvent],
    ) -> None:
        f = _facts(assessment, i)
        device = assessment.batch.device
        policy = self.config.policy(f.quantity, f.lane)
        track = self.state.tracks.get(key)
        if track is None:
            track = Track(device, PENDING, f.condition, now)
            self.state.add(key, track)
        if track.phase == PENDING:
            track.condition = f.condition
            if now - track.since >= policy.open_hold_s:
                event = self._event(AlertKind.OPEN, key, f, device, now, track.since, context)
                track.phase, track.last = FIRING, event
                events.append(event)
            return
        was_stale = track.phase in (STALE_PHASE, STALE_CLEARING)
        track.phase, track.clear_since, track.condition = FIRING, None, f.condition
        assert track.last is not None
        if was_stale or _material(track.last, f, policy.update_step):
            track.last = self._event(AlertKind.UPDATE, key, f, device, now, track.since, context)
            events.append(track.last)

    def _clear(
        self, key: str, i: int | None, assessment: Assessment, now: float, events: list[AlertEvent]
    ) -> None:
        track = self.state.tracks[key]
        if track.phase == PENDING:
            self.state.drop(key)
            return
        if track.clear_since is None:
            track.clear_since = now
            track.phase = STALE_CLEARING if track.phase == STALE_PHASE else CLEARING
        assert track.last is not None
        last = track.last
        # The lifecycle only ever makes reading events (link findings: rules/link_alerts.py).
        assert last.quantity is not None and last.condition is not None
        policy = self.config.policy(last.quantity, last.lane)
        hold = policy.gone_hold_s if i is None else policy.resolve_hold_s
        if now - track.clear_since < hold:
            return
        value = None if i is None else _opt(float(assessment.batch.value[i]))
        summary = resolved_summary(
            last.quantity,
            last.port,
            last.lane,
            value,
            last.condition,
            gone_from=last.device if i is None else None,
        )
        event = replace(
            last,
            kind=AlertKind.RESOLVE,
            sequence=self.state.next_sequence(key),
            value=value,
            margin_db=None,
            summary=summary,
            advice="",
            caution="",
            ends_at=track.clear_since,
            at=now,
        )
        self.state.drop(key)
        events.append(event)

    def _event(
        self,
        kind: AlertKind,
        key: str,
        f: _Facts,
        device: str,
        now: float,
        starts_at: float,
        context: Mapping[tuple[str, int, Quantity], AdviceContext] | None,
    ) -> AlertEvent:
        ctx = context.get((f.port, f.lane, f.quantity)) if context else None
        words = advise(
            f.condition,
            f.quantity,
            math.nan if f.value is None else f.value,
            low_edge=f.low,
            high_edge=f.high,
            context=ctx,
            targets=self.config.targets,
        )
        return AlertEvent(
            kind=kind,
            key=key,
            sequence=self.state.next_sequence(key),
            alertname=ALERTNAMES[f.condition],
            severity=f.condition.severity.alert,
            device=device,
            port=f.port,
            lane=f.lane,
            quantity=f.quantity,
            condition=f.condition,
            value=f.value,
            unit=f.quantity.unit,
            edge_name=f.edge_name,
            edge_value=f.edge_value,
            window_source=f.source,
            margin_db=f.margin,
            rate_per_day=None if ctx is None else ctx.rate_per_day,
            summary=summarize(
                f.condition,
                f.quantity,
                f.port,
                f.lane,
                f.value,
                f.edge_name,
                f.edge_value,
                f.source.word,
            ),
            advice=words.text,
            caution=words.caution,
            starts_at=starts_at,
            at=now,
        )


@dataclass(slots=True, frozen=True)
class _Facts:
    """The numbers of one alerting row; cheap to compare before any words are written."""

    condition: Condition
    quantity: Quantity
    port: str
    lane: int
    value: float | None
    low: float
    high: float
    edge_name: str
    edge_value: float | None
    margin: float | None
    source: WindowSource


def _facts(a: Assessment, i: int) -> _Facts:
    batch = a.batch
    assert a.edge is not None and a.edge_value is not None and a.edge_source is not None
    assert a.edge_margin_db is not None
    quantity = Quantity(int(batch.quantity[i]))
    condition = Condition(int(a.condition[i]))
    edge = Edge(int(a.edge[i]))
    return _Facts(
        condition=condition,
        quantity=quantity,
        port=batch.optics[int(batch.optic[i])].port,
        lane=int(batch.lane[i]),
        value=_opt(float(batch.value[i])),
        low=float(a.low_edge[i]),
        high=float(a.high_edge[i]),
        edge_name=edge.word,
        edge_value=_opt(float(a.edge_value[i])) if edge is not Edge.NONE else None,
        margin=_opt(float(a.edge_margin_db[i])),
        source=WindowSource(int(a.edge_source[i])),
    )


def _tracked_rows(batch: ReadingBatch, keys: set[str]) -> np.ndarray:
    """Rows of the batch on ports that have a track: the only healthy rows worth a key."""
    ports = {split_alert_key(k)[1] for k in keys}
    optics = [n for n, o in enumerate(batch.optics) if o.port in ports]
    return np.isin(batch.optic, optics)


def _row_key(batch: ReadingBatch, i: int) -> str:
    optic = batch.optics[int(batch.optic[i])]
    return alert_key(batch.device, optic.port, int(batch.lane[i]), Quantity(int(batch.quantity[i])))


def _check_aligned(a: Assessment) -> None:
    n = len(a.batch)
    for name in (
        "low_edge",
        "high_edge",
        "low_warning",
        "high_warning",
        "window_source",
        "margin_low_db",
        "margin_high_db",
        "instant",
        "condition",
    ):
        size = getattr(a, name).shape[0]
        if size != n:
            raise ValueError(
                f"assessment for {a.batch.device}: {name} has {size} rows, the batch has {n}"
            )


#: Readings come in 0.01 dB steps; without slack, -2.3 - (-1.8) = 0.4999... misses 0.5.
_STEP_SLACK = 1e-9


def _material(last: AlertEvent, new: _Facts, step: float) -> bool:
    """Is ``new`` different enough from what the receiver last heard to send it?"""
    if (last.condition, last.edge_name, last.window_source) != (
        new.condition,
        new.edge_name,
        new.source,
    ):
        return True
    for old, cur in (
        (last.value, new.value),
        (last.margin_db, new.margin),
        (last.edge_value, new.edge_value),
    ):
        if (old is None) != (cur is None):
            return True
        if old is not None and cur is not None and abs(cur - old) >= step - _STEP_SLACK:
            return True
    return False


def _last_summary(last: AlertEvent) -> str:
    prefix = "No answer from "
    if last.summary.startswith(prefix):  # never nest "last known" inside itself
        return last.summary.split("; last known: ", 1)[-1]
    return last.summary
