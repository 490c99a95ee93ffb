"""Judging one poll: windows, margins and conditions for every row of a ReadingBatch.

Rx power (value in dBm, window low edge = sensitivity, high edge = overload):

- value at or over the overload edge: OVERLOADED; at or under sensitivity: BELOW_SENSITIVITY;
- less than ``overload_db`` below overload: NEAR_OVERLOAD; less than ``sensitivity_db``
  above sensitivity: NEAR_SENSITIVITY (if both, the nearer edge);
- otherwise HEALTHY.

Other quantities: past a high/low alarm: ALARM; past a high/low warning: WARNING.

Rows without a value: NO_LIGHT on Rx/Tx power is DARK unless the port is admin down
(then HEALTHY, noted); UNAVAILABLE, UNSUPPORTED and INVALID are UNKNOWN. A row with a
value but no window edge at all is HEALTHY with the note "no window known" and window
source NONE: it is shown, not judged (UNKNOWN is kept for missing *values*).

Margin targets default to 3 dB above sensitivity and 1 dB below overload, the common
practice in standards.md "Rules of thumb" (practice, no single source).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch, ReadingStatus
from lightwarden.rules.catalogue import Catalogue, default_catalogue
from lightwarden.rules.findings import SEVERITY_OF, Assessment, Condition, WindowSource
from lightwarden.rules.hysteresis import ConditionTracker
from lightwarden.rules.windows import (
    OpticWindows,
    OverrideIndex,
    Window,
    WindowOverride,
    WindowResolver,
)

_Q = len(Quantity)
_RX = int(Quantity.RX_POWER)
_TX = int(Quantity.TX_POWER)
NO_WINDOW_NOTE = "no window known"
ADMIN_DOWN_NOTE = "port admin down"


@dataclass(slots=True, frozen=True)
class MarginTargets:
    """How much room a healthy receiver keeps, in dB (practice: standards.md)."""

    sensitivity_db: float = 3.0
    overload_db: float = 1.0

    def __post_init__(self) -> None:
        for name in ("sensitivity_db", "overload_db"):
            value = getattr(self, name)
            if not value >= 0.0:
                raise ValueError(f"margin targets: {name} must be 0 or more, got {value!r}")


def judge(
    quantity: np.ndarray,
    value: np.ndarray,
    low: np.ndarray,
    high: np.ndarray,
    low_warning: np.ndarray,
    high_warning: np.ndarray,
    targets: MarginTargets,
    shrink: np.ndarray | float = 0.0,
) -> np.ndarray:
    """Conditions of rows that have a value, from edges alone (NaN edges never fire).

    ``shrink`` moves every edge that far into the window (per row, in the row's unit);
    with the hysteresis as ``shrink`` this gives the strict judgement a row must pass
    before its held condition may improve.
    """
    shrink = np.broadcast_to(np.asarray(shrink, dtype=np.float64), value.shape)
    is_rx = quantity == _RX
    with np.errstate(invalid="ignore"):
        m_high = high - value
        m_low = value - low
        short_o = np.where(is_rx, targets.overload_db + shrink - m_high, np.nan)
        short_s = np.where(is_rx, targets.sensitivity_db + shrink - m_low, np.nan)
        short_o = np.nan_to_num(short_o, nan=-np.inf)
        short_s = np.nan_to_num(short_s, nan=-np.inf)
        out = np.full(value.shape, int(Condition.HEALTHY), dtype=np.int8)
        near = np.maximum(short_o, short_s) > 0.0
        # Both targets missed (a window narrower than the two targets): name the nearer edge.
        nearer_overload = np.where(
            (short_s > 0.0) & (short_o > 0.0), m_high < m_low, short_o > 0.0
        )
        out[near] = np.where(nearer_overload[near], Condition.NEAR_OVERLOAD,
                             Condition.NEAR_SENSITIVITY)
        out[is_rx & (m_low <= shrink)] = Condition.BELOW_SENSITIVITY
        out[is_rx & (m_high <= shrink)] = Condition.OVERLOADED

        other = ~is_rx
        warn = other & ((value > high_warning - shrink) | (value < low_warning + shrink))
        alarm = other & ((value > high - shrink) | (value < low + shrink))
        out[warn] = Condition.WARNING
        out[alarm] = Condition.ALARM
    return out


def _window_table(
    batch: ReadingBatch, resolver: WindowResolver
) -> tuple[list[Window], np.ndarray]:
    """Distinct windows used by the batch, and each row's index into them."""
    unique: dict[int, int] = {}
    resolved: list[OpticWindows] = []
    optic_u = np.empty(len(batch.optics), dtype=np.int64)
    for i, optic in enumerate(batch.optics):
        ow = resolver(optic)
        u = unique.get(id(ow))
        if u is None:
            u = unique[id(ow)] = len(resolved)
            resolved.append(ow)
        optic_u[i] = u
    windows = [w for ow in resolved for w in ow.by_quantity]
    row_win = optic_u[batch.optic] * _Q + batch.quantity.astype(np.int64)
    for u, ow in enumerate(resolved):
        if not ow.by_lane:
            continue
        of_u = np.isin(batch.optic, np.nonzero(optic_u == u)[0])
        for (q, lane), w in ow.by_lane.items():
            rows = of_u & (batch.quantity == int(q)) & (batch.lane == lane)
            if rows.any():
                row_win[rows] = len(windows)
                windows.append(w)
    return windows, row_win


def assess(
    batch: ReadingBatch,
    catalogue: Catalogue | None = None,
    overrides: Iterable[WindowOverride] | OverrideIndex = (),
    targets: MarginTargets | None = None,
    tracker: ConditionTracker | None = None,
    now: float | None = None,
    *,
    resolver: WindowResolver | None = None,
) -> Assessment:
    """Judge every row of ``batch``.

    ``tracker`` carries held conditions from poll to poll (pass the same one each
    time); without it ``condition`` equals ``instant``. ``now`` defaults to the batch's
    ``taken_at``. Pass a long-lived ``resolver`` to reuse resolved windows across polls
    (then ``catalogue`` and ``overrides`` are taken from it).
    """
    targets = targets or MarginTargets()
    if resolver is None:
        resolver = WindowResolver(catalogue or default_catalogue(), overrides)
    now = batch.taken_at if now is None else now
    n = len(batch)

    windows, row_win = _window_table(batch, resolver)
    table = np.array([w.edges for w in windows], dtype=np.float64).reshape(-1, 4)
    src_table = np.array([int(w.source) for w in windows], dtype=np.int8)
    low, high, low_w, high_w = (table[row_win, k] for k in range(4))
    source = src_table[row_win] if n else np.empty(0, dtype=np.int8)

    q = batch.quantity.astype(np.int64)
    value = batch.value
    status = batch.status
    ok = status == ReadingStatus.OK
    power = (q == _RX) | (q == _TX)
    with np.errstate(invalid="ignore"):
        margin_high = np.where(power, high - value, np.nan)
        margin_low = np.where(power, value - low, np.nan)

    policy_shrink = (tracker.policy.hysteresis()[q] if tracker is not None
                     else np.zeros(n))
    instant = judge(q, value, low, high, low_w, high_w, targets)
    strict = judge(q, value, low, high, low_w, high_w, targets, policy_shrink)

    notes: dict[int, list[str]] = {}

    def note(rows: np.ndarray, text: str) -> None:
        for r in np.nonzero(rows)[0].tolist():
            notes.setdefault(r, []).append(text)

    admin_down_optic = np.array([o.admin_up is False for o in batch.optics], dtype=bool)
    admin_down = admin_down_optic[batch.optic] if n else np.zeros(0, dtype=bool)
    no_light = status == ReadingStatus.NO_LIGHT
    dark = no_light & power & ~admin_down
    quiet = no_light & power & admin_down
    unknown = ~ok & ~dark & ~quiet
    for arr in (instant, strict):
        arr[dark] = Condition.DARK
        arr[quiet] = Condition.HEALTHY
        arr[unknown] = Condition.UNKNOWN
    note(quiet, ADMIN_DOWN_NOTE)
    for st in (ReadingStatus.UNAVAILABLE, ReadingStatus.UNSUPPORTED, ReadingStatus.INVALID,
               ReadingStatus.NO_LIGHT):
        note(unknown & (status == st), f"no usable value ({st.name.lower().replace('_', ' ')})")

    unjudged = ok & (source == WindowSource.NONE)
    note(unjudged, NO_WINDOW_NOTE)
    win_notes = np.array([bool(w.note) for w in windows], dtype=bool)
    if win_notes.any():
        rows = np.nonzero(win_notes[row_win])[0]
        for r, k in zip(rows.tolist(), row_win[rows].tolist(), strict=True):
            notes.setdefault(r, []).append(windows[k].note)

    if tracker is not None and n:
        condition = tracker.update_batch(batch, instant, strict, now)
    else:
        condition = instant.copy()

    optic_condition = _worst_per_optic(batch, condition)
    return Assessment(
        batch=batch,
        low_edge=low,
        high_edge=high,
        low_warning=low_w,
        high_warning=high_w,
        window_source=source.astype(np.int8),
        margin_low_db=margin_low,
        margin_high_db=margin_high,
        instant=instant,
        condition=condition.astype(np.int8),
        optic_condition=optic_condition,
        notes={r: "; ".join(t) for r, t in notes.items()},
    )


def _worst_per_optic(batch: ReadingBatch, condition: np.ndarray) -> np.ndarray:
    """Worst row condition per optic: highest severity, then highest code; an optic with
    no rows at all is UNKNOWN."""
    m = len(batch.optics)
    rank = np.full(m, -1, dtype=np.int64)
    if len(batch):
        c = condition.astype(np.int64)
        # Severity first, code second, packed in one number (codes stay below 16).
        np.maximum.at(rank, batch.optic.astype(np.int64), SEVERITY_OF[c].astype(np.int64) * 16 + c)
    out = np.where(rank < 0, int(Condition.UNKNOWN), rank % 16)
    return out.astype(np.int8)
