"""Judging one poll: windows, margins and conditions for every row of a ReadingBatch.

Each row gets two judgements (rules/windows.py) and its condition is the worse of them
(by ``Severity``; at equal severity the margin judgement, whose advice is more specific):

- **margin edges**, Rx power (value in dBm, low edge = sensitivity, high edge =
  overload): at or over the overload edge OVERLOADED; at or under sensitivity
  BELOW_SENSITIVITY; less than ``overload_db`` below overload NEAR_OVERLOAD; less than
  ``sensitivity_db`` above sensitivity NEAR_SENSITIVITY (if both, the nearer edge).
  Tx power outside the standard's launch window: OFF_STANDARD.
- **declared levels**, every quantity: past a high/low alarm ALARM, past a high/low
  warning WARNING.

Rows without a value: NO_LIGHT on Rx power is DARK unless the port is admin down (then
HEALTHY, noted). NO_LIGHT on Tx power is this end's transmitter: with the lane's bias at
or below ``LASER_OFF_BIAS_MA`` it is LASER_OFF (and the zero bias row is LASER_OFF too,
caused by it), with bias flowing TX_FAULT (the laser is driven and gives no light), with
no bias reading DARK. UNAVAILABLE, UNSUPPORTED and INVALID are UNKNOWN. A row with a
value but no edge at all is HEALTHY with the note "no window known" and window source
NONE: it is shown, not judged (UNKNOWN is kept for missing *values*).

Margin targets default to 3 dB above sensitivity and 1 dB below overload, the common
practice in standards.md "Rules of thumb" (practice, no single source).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch, ReadingStatus
from lightwarden.rules.catalogue import Catalogue, default_catalogue
from lightwarden.rules.findings import (
    SEVERITY_OF,
    Assessment,
    Condition,
    Edge,
    Severity,
    WindowSource,
    alert_key,
    derive_edge,
    edge_facts,
)
from lightwarden.rules.hysteresis import ConditionTracker
from lightwarden.rules.windows import (
    OpticWindows,
    OverrideIndex,
    Window,
    WindowOverride,
    WindowResolver,
    total_window,
)

_Q = len(Quantity)
_RX = int(Quantity.RX_POWER)
_TX = int(Quantity.TX_POWER)
_BIAS = int(Quantity.BIAS)
NO_WINDOW_NOTE = "no window known"
ADMIN_DOWN_NOTE = "port admin down"
#: At or below this bias a laser is not lasing: well under the threshold current of the
#: lasers in these optics (VCSELs lase from about 0.5-1 mA, DFB lasers from several mA;
#: from memory). A disabled transmitter reads 0 mA or a few uA.
LASER_OFF_BIAS_MA = 0.2


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
    edges: np.ndarray,
    sources: np.ndarray,
    targets: MarginTargets,
    shrink: np.ndarray | float = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """(condition, edge) of rows that have a value, from edges alone (NaN never fires).

    ``edges`` and ``sources`` are (n, 6) in ``EDGE_COLUMNS`` order. ``shrink`` moves
    every edge that far into the window (per row, in the row's unit); with the
    hysteresis as ``shrink`` this gives the strict judgement a row must pass before its
    held condition may improve.
    """
    n = value.shape[0]
    shrink = np.broadcast_to(np.asarray(shrink, dtype=np.float64), value.shape)
    low, high, lo_a, hi_a, lo_w, hi_w = (edges[:, k] for k in range(6)) if n else (
        np.zeros(0),) * 6
    is_rx = quantity == _RX
    is_tx = quantity == _TX
    with np.errstate(invalid="ignore"):
        # The margin judgement (Rx against sensitivity/overload).
        m_high = high - value
        m_low = value - low
        short_o = np.where(is_rx, targets.overload_db + shrink - m_high, np.nan)
        short_s = np.where(is_rx, targets.sensitivity_db + shrink - m_low, np.nan)
        short_o = np.nan_to_num(short_o, nan=-np.inf)
        short_s = np.nan_to_num(short_s, nan=-np.inf)
        margin_c = np.full(n, int(Condition.HEALTHY), dtype=np.int8)
        near = np.maximum(short_o, short_s) > 0.0
        # Both targets missed (a window narrower than the two targets): name the nearer edge.
        nearer_overload = np.where(
            (short_s > 0.0) & (short_o > 0.0), m_high < m_low, short_o > 0.0
        )
        margin_c[near] = np.where(nearer_overload[near], Condition.NEAR_OVERLOAD,
                                  Condition.NEAR_SENSITIVITY)
        margin_c[is_rx & (m_low <= shrink)] = Condition.BELOW_SENSITIVITY
        margin_c[is_rx & (m_high <= shrink)] = Condition.OVERLOADED
        mid = np.where(np.isfinite(low) & np.isfinite(high), (low + high) / 2.0,
                       np.where(np.isfinite(high), -np.inf, np.inf))
        rx_high = np.isin(margin_c, (Condition.NEAR_OVERLOAD, Condition.OVERLOADED)) | (
            (margin_c == Condition.HEALTHY) & (value >= mid))
        margin_e = np.zeros(n, dtype=np.int8)
        margin_e[is_rx] = np.where(rx_high[is_rx], Edge.OVERLOAD, Edge.SENSITIVITY)

        # Tx against the standard's launch window (only where the standard gave it).
        std = sources == int(WindowSource.PMD_TABLE) if n else np.zeros((0, 6), dtype=bool)
        tx_lo = is_tx & std[:, 0] & (value < low + shrink)
        tx_hi = is_tx & std[:, 1] & (value > high - shrink)
        margin_c[tx_lo | tx_hi] = Condition.OFF_STANDARD
        margin_e[tx_lo] = Edge.LAUNCH_MIN
        margin_e[tx_hi] = Edge.LAUNCH_MAX

        # The declared levels, every quantity.
        level_c = np.full(n, int(Condition.HEALTHY), dtype=np.int8)
        level_e = np.zeros(n, dtype=np.int8)
        for past, cond, which in (
            (value < lo_w + shrink, Condition.WARNING, Edge.LOW_WARNING),
            (value > hi_w - shrink, Condition.WARNING, Edge.HIGH_WARNING),
            (value < lo_a + shrink, Condition.ALARM, Edge.LOW_ALARM),
            (value > hi_a - shrink, Condition.ALARM, Edge.HIGH_ALARM),
        ):
            level_c[past] = cond
            level_e[past] = which

    take_level = SEVERITY_OF[level_c] > SEVERITY_OF[margin_c]
    condition = np.where(take_level, level_c, margin_c).astype(np.int8)
    edge = np.where(take_level, level_e, margin_e).astype(np.int8)
    return condition, edge


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
    total = (batch.lane == 0) & ((batch.quantity == _RX) | (batch.quantity == _TX))
    if total.any():
        # A total-power reading of a multi-lane optic: its per-lane window, moved up.
        made: dict[tuple[int, int, int], int] = {}
        for r in np.flatnonzero(total).tolist():
            o, q = int(batch.optic[r]), int(batch.quantity[r])
            lanes = batch.optics[o].lanes
            if lanes <= 1:
                continue
            key = (int(optic_u[o]), q, lanes)
            k = made.get(key)
            if k is None:
                k = made[key] = len(windows)
                windows.append(total_window(resolved[key[0]].by_quantity[q], lanes))
            row_win[r] = k
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
    table = np.array([w.edges for w in windows], dtype=np.float64).reshape(-1, 6)
    src6 = np.array([[int(x) for x in w.sources] for w in windows], dtype=np.int8).reshape(-1, 6)
    src_table = np.array([int(w.source) for w in windows], dtype=np.int8)
    oma_table = np.array([w.oma_equivalent_dbm for w in windows], dtype=np.float64)
    edges = table[row_win] if n else np.zeros((0, 6))
    edge_sources = src6[row_win] if n else np.zeros((0, 6), dtype=np.int8)
    source = src_table[row_win] if n else np.empty(0, dtype=np.int8)
    low, high = edges[:, 0], edges[:, 1]

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
    instant, instant_edge = judge(q, value, edges, edge_sources, targets)
    strict, _ = judge(q, value, edges, edge_sources, targets, policy_shrink)

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
    instant_edge[dark & (q == _TX)] = Edge.NONE
    instant_edge[unknown & (q != _RX)] = Edge.NONE
    note(quiet, ADMIN_DOWN_NOTE)
    for st in (ReadingStatus.UNAVAILABLE, ReadingStatus.UNSUPPORTED, ReadingStatus.INVALID,
               ReadingStatus.NO_LIGHT):
        note(unknown & (status == st), f"no usable value ({st.name.lower().replace('_', ' ')})")

    # The module's own flags first: a TX_FAULT it flags says why its Tx is dark, so the
    # bias reading is not taken for a laser switched off.
    _module_flags(batch, (instant, strict), instant_edge, note)
    cause = _near_end_transmitters(batch, dark & (q == _TX), (instant, strict), instant_edge,
                                   note)
    _lane_spread(batch, resolver, (instant, strict), instant_edge, note)

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
    condition = condition.astype(np.int8)
    # The edge of the held condition: this sample's where the two agree, else derived
    # from the held condition (a row clearing names the edge it is clearing from).
    edge = np.where(condition == instant, instant_edge,
                    derive_edge(batch.quantity, condition, value, edges)).astype(np.int8)
    edge_value, edge_source, edge_margin = edge_facts(batch.quantity, value, edge, edges,
                                                      edge_sources)

    optic_condition = _worst_per_optic(batch, condition)
    return Assessment(
        batch=batch,
        low_edge=low,
        high_edge=high,
        low_warning=edges[:, 4],
        high_warning=edges[:, 5],
        window_source=source.astype(np.int8),
        margin_low_db=margin_low,
        margin_high_db=margin_high,
        instant=instant,
        condition=condition,
        optic_condition=optic_condition,
        notes={r: "; ".join(t) for r, t in notes.items()},
        low_alarm=edges[:, 2],
        high_alarm=edges[:, 3],
        edge_sources=edge_sources,
        edge=edge,
        edge_value=edge_value,
        edge_source=edge_source,
        edge_margin_db=edge_margin,
        cause=cause,
        oma_equivalent_dbm=oma_table[row_win] if n else np.zeros(0),
    )


LASER_OFF_NOTE = "no light from this end's transmitter and no laser bias: the laser is off"
TX_FAULT_NOTE = "no light from this end's transmitter though its laser is driven ({:.1f} mA)"


def _near_end_transmitters(
    batch: ReadingBatch,
    dark_tx: np.ndarray,
    judged: tuple[np.ndarray, ...],
    edge: np.ndarray,
    note: Callable[[np.ndarray, str], None],
) -> dict[int, str]:
    """Tell why this end's Tx gives no light, from the same lane's bias.

    Bias at or under ``LASER_OFF_BIAS_MA``: the laser is off (LASER_OFF on both rows;
    the bias row is caused by the Tx row and raises no alert of its own). Bias flowing:
    TX_FAULT. No bias reading: DARK stays, this end's transmitter named in the advice.
    """
    cause: dict[int, str] = {}
    tx_rows = np.flatnonzero(dark_tx)
    if tx_rows.size == 0:
        return cause
    bias_rows = np.flatnonzero((batch.quantity == _BIAS) & (batch.status == ReadingStatus.OK))
    bias_at = {(int(batch.optic[r]), int(batch.lane[r])): r for r in bias_rows.tolist()}
    for r in tx_rows.tolist():
        o, lane = int(batch.optic[r]), int(batch.lane[r])
        b = bias_at.get((o, lane))
        if b is None:
            continue
        mark = np.zeros(len(batch), dtype=bool)
        mark[r] = True
        bias = float(batch.value[b])
        if judged[0][r] == Condition.TX_FAULT:
            # flagged by the module: the fault explains the zero (or any) bias
            if bias <= LASER_OFF_BIAS_MA:
                for arr in judged:
                    arr[b] = Condition.TX_FAULT
                edge[b] = Edge.NONE
                cause[b] = alert_key(batch.device, batch.optics[o].port, lane, Quantity.TX_POWER)
            continue
        if bias <= LASER_OFF_BIAS_MA:
            for arr in judged:
                arr[r] = arr[b] = Condition.LASER_OFF
            edge[b] = Edge.NONE
            cause[b] = alert_key(batch.device, batch.optics[o].port, lane, Quantity.TX_POWER)
            note(mark, LASER_OFF_NOTE)
        else:
            for arr in judged:
                arr[r] = Condition.TX_FAULT
            note(mark, TX_FAULT_NOTE.format(bias))
    return cause


TX_FAULT_FLAG_NOTE = "the module flags a transmitter fault (TX_FAULT)"
LOS_FLAG_NOTE = "the module flags loss of signal (RX_LOS)"
NOT_READY_NOTE = "module state {!r}, not ready (CMIS)"
LATCHED_NOTE = "the module latched its {} flag since it was last read"

_FLAG_QUANTITY = {q.label: q for q in Quantity}


def _module_flags(
    batch: ReadingBatch,
    judged: tuple[np.ndarray, ...],
    edge: np.ndarray,
    note: Callable[[np.ndarray, str], None],
) -> None:
    """Conditions from the status flags a module sets (its memory map).

    TX_FAULT on a lane's Tx row and RX_LOS on an Rx row that still reads light are
    conditions of their own (a dark Rx stays DARK: the flag says the same). A CMIS module
    out of its ready state is NOT_READY on its module-wide rows. Latched alarm and warning
    flags mark the flagged reading LATCHED_ALARM / LATCHED_WARNING only when its own
    judgement is milder (a value back inside its levels, flagged in between).
    """
    flagged = [(o, opt) for o, opt in enumerate(batch.optics)
               if opt.flags or opt.module_state not in ("", "ready")]
    if not flagged:
        return
    rows: dict[tuple[int, int, int], int] = {}
    for r in np.flatnonzero(np.isin(batch.optic, [o for o, _ in flagged])).tolist():
        rows.setdefault((int(batch.optic[r]), int(batch.quantity[r]), int(batch.lane[r])), r)

    def mark(r: int, condition: Condition, text: str, *, only_if_milder: bool = False) -> None:
        current = Condition(int(judged[0][r]))
        if only_if_milder and current.severity >= condition.severity:
            return
        if current in (Condition.LASER_OFF, Condition.DARK) and condition not in (
                Condition.NOT_READY, Condition.TX_FAULT):
            return  # no light at all already says more than the flag (TX_FAULT says why)
        for arr in judged:
            arr[r] = condition
        if condition in (Condition.TX_FAULT, Condition.LOSS_OF_SIGNAL, Condition.NOT_READY):
            edge[r] = Edge.NONE
        one = np.zeros(len(batch), dtype=bool)
        one[r] = True
        note(one, text)

    for o, opt in flagged:
        for name, lane in sorted(opt.flags):
            row: int | None
            if name == "tx_fault":
                row = rows.get((o, _TX, lane))
                if row is not None:
                    mark(row, Condition.TX_FAULT, TX_FAULT_FLAG_NOTE)
            elif name == "rx_los":
                row = rows.get((o, _RX, lane))
                if row is not None and batch.status[row] == ReadingStatus.OK:
                    mark(row, Condition.LOSS_OF_SIGNAL, LOS_FLAG_NOTE)
            else:
                label, _, level = name.rpartition("_")
                quantity = _FLAG_QUANTITY.get(label.rsplit("_", 1)[0])
                if quantity is None or level not in ("alarm", "warning"):
                    continue
                row = rows.get((o, int(quantity), lane))
                if row is None or batch.status[row] != ReadingStatus.OK:
                    continue
                latched = Condition.LATCHED_ALARM if level == "alarm" else Condition.LATCHED_WARNING
                mark(row, latched, LATCHED_NOTE.format(name.replace("_", " ")),
                     only_if_milder=True)
        if opt.module_state not in ("", "ready"):
            for q in (Quantity.TEMPERATURE, Quantity.SUPPLY):
                row = rows.get((o, int(q), 0))
                if row is not None:
                    mark(row, Condition.NOT_READY, NOT_READY_NOTE.format(opt.module_state),
                         only_if_milder=True)
                    break


LANE_SPREAD_NOTE = ("{q} lanes differ by {spread:.1f} dB, more than the {bound:.1f} dB the "
                    "standard allows between any two lanes ({pmd}; it states OMA, the "
                    "readings are average power)")


def _lane_spread(
    batch: ReadingBatch,
    resolver: WindowResolver,
    judged: tuple[np.ndarray, ...],
    edge: np.ndarray,
    note: Callable[[np.ndarray, str], None],
) -> None:
    """LANE_IMBALANCE on the weakest lane where lanes differ by more than the PMD row's
    bound, when that lane's own judgement is milder (a weak lane already near
    sensitivity says so itself)."""
    multi = [o for o, opt in enumerate(batch.optics) if opt.lanes > 1]
    if not multi or len(batch) == 0:
        return
    ok = batch.status == ReadingStatus.OK
    for o in multi:
        pmd = resolver(batch.optics[o]).pmd
        if pmd is None:
            continue
        for q, bound in ((_RX, pmd.lane_spread_rx_db), (_TX, pmd.lane_spread_tx_db)):
            if bound is None:
                continue
            rows = np.flatnonzero((batch.optic == o) & (batch.quantity == q) & ok
                                  & (batch.lane > 0))
            if rows.size < 2:
                continue
            values = batch.value[rows]
            spread = float(values.max() - values.min())
            if spread <= bound:
                continue
            weakest = int(rows[int(np.argmin(values))])
            if SEVERITY_OF[judged[0][weakest]] >= Severity.WARNING:
                continue
            for arr in judged:
                arr[weakest] = Condition.LANE_IMBALANCE
            edge[weakest] = Edge.NONE
            one = np.zeros(len(batch), dtype=bool)
            one[weakest] = True
            note(one, LANE_SPREAD_NOTE.format(q="Rx" if q == _RX else "Tx", spread=spread,
                                              bound=bound, pmd=pmd.name))


def _worst_per_optic(batch: ReadingBatch, condition: np.ndarray) -> np.ndarray:
    """Worst row condition per optic: highest severity, then highest code; an optic with
    no rows at all is UNKNOWN."""
    m = len(batch.optics)
    rank = np.full(m, -1, dtype=np.int64)
    if len(batch):
        c = condition.astype(np.int64)
        # Severity first, code second, packed in one number (codes stay below 64).
        np.maximum.at(rank, batch.optic.astype(np.int64), SEVERITY_OF[c].astype(np.int64) * 64 + c)
    out = np.where(rank < 0, int(Condition.UNKNOWN), rank % 64)
    return out.astype(np.int8)
