"""What the rule layer hands to the exporters.

``Assessment`` is columnar and aligned row for row with the ``ReadingBatch`` it judges,
so an exporter walks the same arrays the collector filled. ``AlertEvent`` is one step in
an alert's life (open, update, stale, resolve), already carrying the words an operator
reads; delivery (Alertmanager, webhook, outbox) only moves it. Its facts are enum
members; they turn into words only where an event is written out (rules/event_codec.py).

``Severity`` with the ``_SEVERITY`` table below is the one severity order: sorting,
"may this alert", page colours and metric values all read it (or ``SEVERITY_OF``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import IntEnum, StrEnum

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch


class Condition(IntEnum):
    """Judgement of one reading (and, as the worst of its rows, of one optic).

    Codes are stable (arrays and metrics store them). ``severity`` orders them for
    "worst first" lists; the names are ours and appear in metrics, JSON and pages.
    """

    HEALTHY = 0
    NEAR_SENSITIVITY = 1  # Rx above sensitivity but by less than the margin target
    NEAR_OVERLOAD = 2  # Rx below overload but by less than the margin target
    BELOW_SENSITIVITY = 3  # Rx at or under the low edge: errors expected
    OVERLOADED = 4  # Rx at or over the high edge: receiver saturating, errors expected
    WARNING = 5  # a non-Rx quantity past a warning threshold
    ALARM = 6  # a non-Rx quantity past an alarm threshold
    DARK = 7  # no light where light is expected (port admin up)
    UNKNOWN = 8  # no usable value (sensor unavailable, unsupported, garbage)
    LASER_OFF = 9  # this end's Tx gives no light and its laser bias is zero
    OFF_STANDARD = 10  # Tx outside the standard's launch window, inside the module's levels
    TX_FAULT = 11  # the module flags a transmitter fault (or its laser is driven, no light)
    LOSS_OF_SIGNAL = 12  # the module flags loss of signal on a receiver that reads light
    NOT_READY = 13  # a CMIS module that is not in its ready state
    LATCHED_ALARM = 14  # the module latched an alarm flag since it was last read
    LATCHED_WARNING = 15  # the module latched a warning flag since it was last read
    LANE_IMBALANCE = 16  # lanes of one optic differ by more than the standard allows

    @property
    def word(self) -> str:
        return self.name.lower()

    @classmethod
    def from_word(cls, word: object) -> Condition:
        """The condition whose ``word`` is ``word``; ValueError otherwise."""
        found = _CONDITION_BY_WORD.get(word) if isinstance(word, str) else None
        if found is None:
            raise ValueError(f"condition {word!r} is not one of {sorted(_CONDITION_BY_WORD)}")
        return found

    @property
    def severity(self) -> Severity:
        """How bad, for "worst first" lists and alert severities."""
        return _SEVERITY[self]


_CONDITION_BY_WORD = {c.word: c for c in Condition}


class Severity(IntEnum):
    """The one severity order: everything that sorts or labels by severity reads it here."""

    NONE = 0
    INFO = 1  # no usable value: no evidence either way
    WARNING = 2
    CRITICAL = 3

    @property
    def word(self) -> str:
        return self.name.lower()

    @property
    def alert(self) -> AlertSeverity:
        """The label an alert of this severity carries; ValueError below WARNING."""
        try:
            return AlertSeverity[self.name]
        except KeyError:
            raise ValueError(f"severity {self.word!r} does not raise an alert") from None


class AlertSeverity(StrEnum):
    """An alert's ``severity`` label: the alerting rungs of ``Severity``, as its words."""

    WARNING = Severity.WARNING.word
    CRITICAL = Severity.CRITICAL.word

    @property
    def level(self) -> Severity:
        """Where this label sits in the one severity order (for sorting and colours)."""
        return Severity[self.name]


_SEVERITY = {
    Condition.HEALTHY: Severity.NONE,
    Condition.UNKNOWN: Severity.INFO,
    Condition.NEAR_SENSITIVITY: Severity.WARNING,
    Condition.NEAR_OVERLOAD: Severity.WARNING,
    Condition.WARNING: Severity.WARNING,
    Condition.BELOW_SENSITIVITY: Severity.CRITICAL,
    Condition.OVERLOADED: Severity.CRITICAL,
    Condition.ALARM: Severity.CRITICAL,
    Condition.DARK: Severity.CRITICAL,
    Condition.LASER_OFF: Severity.CRITICAL,
    Condition.OFF_STANDARD: Severity.WARNING,
    Condition.TX_FAULT: Severity.CRITICAL,
    Condition.LOSS_OF_SIGNAL: Severity.CRITICAL,
    Condition.NOT_READY: Severity.WARNING,
    Condition.LATCHED_ALARM: Severity.WARNING,
    Condition.LATCHED_WARNING: Severity.INFO,
    Condition.LANE_IMBALANCE: Severity.WARNING,
}

#: severity per condition code, for vectorised sorting and "which rows may alert";
#: read-only, so no caller can quietly reorder the one table.
SEVERITY_OF = np.array([_SEVERITY[Condition(k)] for k in range(len(Condition))], dtype=np.int8)
SEVERITY_OF.flags.writeable = False

#: Conditions that are facts about the link rather than levels creeping over an edge:
#: the condition tracker adopts them at once (rules/hysteresis.py).
ADOPT_AT_ONCE = np.zeros(len(Condition), dtype=bool)
for _c in (Condition.DARK, Condition.LASER_OFF, Condition.TX_FAULT, Condition.LOSS_OF_SIGNAL):
    ADOPT_AT_ONCE[_c] = True
ADOPT_AT_ONCE.flags.writeable = False


class Edge(IntEnum):
    """Which edge a reading's condition is about. Codes are stable (arrays store them).

    The first two are the *margin edges*: for Rx power the sensitivity and overload (from
    the site, else the standard where the PMD is known, else the module's alarms), for Tx
    power the standard's launch window. The rest are the module's declared levels (or the
    site's, which replace them).
    """

    NONE = 0
    SENSITIVITY = 1
    OVERLOAD = 2
    LAUNCH_MIN = 3
    LAUNCH_MAX = 4
    LOW_ALARM = 5
    HIGH_ALARM = 6
    LOW_WARNING = 7
    HIGH_WARNING = 8

    @property
    def word(self) -> str:
        return "" if self is Edge.NONE else self.name.lower()

    @property
    def high(self) -> bool:
        """Is this an upper edge (the value must stay below it)?"""
        return self in (Edge.OVERLOAD, Edge.LAUNCH_MAX, Edge.HIGH_ALARM, Edge.HIGH_WARNING)

    @classmethod
    def from_word(cls, word: object) -> Edge:
        found = _EDGE_BY_WORD.get(word) if isinstance(word, str) else None
        if found is None:
            raise ValueError(f"edge {word!r} is not one of {sorted(_EDGE_BY_WORD)}")
        return found


_EDGE_BY_WORD = {e.word: e for e in Edge}

#: Columns of ``Assessment.edges`` / ``Window.edges``: margin edges, alarms, warnings.
EDGE_COLUMNS = ("low_edge", "high_edge", "low_alarm", "high_alarm", "low_warning",
                "high_warning")


class WindowSource(IntEnum):
    """Which declaration supplied a reading's window edges (its provenance)."""

    NONE = 0  # nothing known: the reading is shown but not judged
    PMD_TABLE = 1  # the standard: IEEE 802.3 PMD table shipped with lightwarden
    MODULE = 2  # thresholds the module declares in its memory map / CLI output
    SITE = 3  # the site config (per port or per part number)
    PRACTICE = 4  # common practice, no single source (commercial 0-70 C, Vcc 3.3 V +-5 %)

    @property
    def word(self) -> str:
        return _SOURCE_WORDS[self]

    @classmethod
    def from_word(cls, word: object) -> WindowSource:
        """The window source whose ``word`` is ``word``; ValueError otherwise."""
        found = _SOURCE_BY_WORD.get(word) if isinstance(word, str) else None
        if found is None:
            raise ValueError(f"window source {word!r} is not one of {sorted(_SOURCE_BY_WORD)}")
        return found


_SOURCE_WORDS = {
    WindowSource.NONE: "none",
    WindowSource.PMD_TABLE: "standard",
    WindowSource.MODULE: "module",
    WindowSource.SITE: "site",
    WindowSource.PRACTICE: "practice",
}
_SOURCE_BY_WORD = {w: s for s, w in _SOURCE_WORDS.items()}
# The earlier word for the standard, still read from old snapshots and outbox rows.
_SOURCE_BY_WORD["pmd-table"] = WindowSource.PMD_TABLE


@dataclass(slots=True)
class Assessment:
    """The rule layer's verdict on one ReadingBatch, aligned row for row with it.

    Edge arrays are NaN where the window has no such edge. ``low_edge``/``high_edge`` are
    the margin edges (Rx: sensitivity and overload; Tx: the launch window; other
    quantities: the alarm levels), ``low_alarm``/``high_alarm`` and the warnings the
    declared levels (rules/windows.py). Margins are in dB for power rows (NaN elsewhere):
    ``margin_high_db`` = high_edge - value (to overload), ``margin_low_db`` = value -
    low_edge (to sensitivity).

    ``edge`` says which edge each row's condition is about (``Edge``), with its value,
    source and the margin to it (dB, power rows); ``edge_sources`` holds the source of
    every edge in ``EDGE_COLUMNS`` order. ``cause`` maps a row to the alert key of the
    row that explains it (a Tx whose laser is off explains its zero bias and the far
    receiver's darkness): such rows raise no alert of their own.
    """

    batch: ReadingBatch
    low_edge: np.ndarray  # float64
    high_edge: np.ndarray  # float64
    low_warning: np.ndarray  # float64
    high_warning: np.ndarray  # float64
    window_source: np.ndarray  # int8 (WindowSource)
    margin_low_db: np.ndarray  # float64
    margin_high_db: np.ndarray  # float64
    instant: np.ndarray  # int8 (Condition) from this sample alone
    condition: np.ndarray  # int8 (Condition) after hysteresis and hold times
    optic_condition: np.ndarray  # int8 per optic: the worst row condition
    notes: dict[int, str] = field(default_factory=dict)  # row -> why (adds to batch notes)
    low_alarm: np.ndarray | None = None  # float64; None: the margin edges (built by hand)
    high_alarm: np.ndarray | None = None
    edge_sources: np.ndarray | None = None  # int8 (n, 6); None: window_source for all
    edge: np.ndarray | None = None  # int8 (Edge); None: derived from condition and edges
    edge_value: np.ndarray | None = None  # float64
    edge_source: np.ndarray | None = None  # int8 (WindowSource)
    edge_margin_db: np.ndarray | None = None  # float64, power rows
    cause: dict[int, str] = field(default_factory=dict)
    #: Rx rows: the standard's OMA sensitivity as average power (derived, never judged)
    oma_equivalent_dbm: np.ndarray | None = None

    def __post_init__(self) -> None:
        # Assessments built by hand (tests, benchmarks) give only the margin edges; fill
        # the rest the way assess() would, so every reader sees the same shape.
        if self.low_alarm is None:
            self.low_alarm = self.low_edge
        if self.high_alarm is None:
            self.high_alarm = self.high_edge
        if self.edge_sources is None:
            self.edge_sources = np.repeat(self.window_source.astype(np.int8)[:, None], 6, axis=1)
        if self.edge is None:
            self.edge = derive_edge(self.batch.quantity, self.condition, self.batch.value,
                                    self.edges)
        if self.edge_value is None or self.edge_source is None or self.edge_margin_db is None:
            value, source, margin = edge_facts(self.batch.quantity, self.batch.value, self.edge,
                                               self.edges, self.edge_sources)
            self.edge_value, self.edge_source, self.edge_margin_db = value, source, margin

    @property
    def edges(self) -> np.ndarray:
        """All six edges per row, (n, 6) float64 in ``EDGE_COLUMNS`` order."""
        assert self.low_alarm is not None and self.high_alarm is not None
        return np.column_stack((self.low_edge, self.high_edge, self.low_alarm,
                                self.high_alarm, self.low_warning, self.high_warning))


#: Which ``EDGE_COLUMNS`` column holds each Edge (-1: none).
EDGE_COLUMN = np.array([-1, 0, 1, 0, 1, 2, 3, 4, 5], dtype=np.int64)
EDGE_COLUMN.flags.writeable = False

_RXQ, _TXQ = int(Quantity.RX_POWER), int(Quantity.TX_POWER)


def derive_edge(quantity: np.ndarray, condition: np.ndarray, value: np.ndarray,
                edges: np.ndarray) -> np.ndarray:
    """Which edge each row's condition is about, from the condition and the edges alone.

    Rx power rows always name overload or sensitivity (the nearer side; the low side
    when there is no value); Tx rows judged against the standard name the launch edge;
    alarm and warning rows the level they are past.
    """
    n = value.shape[0]
    out = np.zeros(n, dtype=np.int8)
    if n == 0:
        return out
    q = quantity.astype(np.int64)
    c = condition.astype(np.int64)
    low, high = edges[:, 0], edges[:, 1]
    with np.errstate(invalid="ignore"):
        mid = np.where(np.isfinite(low) & np.isfinite(high), (low + high) / 2.0,
                       np.where(np.isfinite(high), -np.inf, np.inf))
        high_side = (c == Condition.OVERLOADED) | (c == Condition.NEAR_OVERLOAD) | (
            (c != Condition.BELOW_SENSITIVITY) & (c != Condition.NEAR_SENSITIVITY)
            & (value >= mid))
        rx = q == _RXQ
        out[rx] = np.where(high_side[rx], Edge.OVERLOAD, Edge.SENSITIVITY)
        tx_std = (q == _TXQ) & (c == Condition.OFF_STANDARD)
        out[tx_std] = np.where(value[tx_std] > high[tx_std], Edge.LAUNCH_MAX, Edge.LAUNCH_MIN)
        level = ~rx & ((c == Condition.ALARM) | (c == Condition.WARNING))
        alarm = c == Condition.ALARM
        hi_col = np.where(alarm, edges[:, 3], edges[:, 5])
        lo_col = np.where(alarm, edges[:, 2], edges[:, 4])
        # The side the value is on (past it, or nearer to it while a held condition clears).
        lvl_mid = np.where(np.isfinite(lo_col) & np.isfinite(hi_col), (lo_col + hi_col) / 2.0,
                           np.where(np.isfinite(hi_col), -np.inf, np.inf))
        up = value >= lvl_mid
        hi_e = np.where(alarm, Edge.HIGH_ALARM, Edge.HIGH_WARNING)
        lo_e = np.where(alarm, Edge.LOW_ALARM, Edge.LOW_WARNING)
        out[level & up] = hi_e[level & up]
        out[level & ~up] = lo_e[level & ~up]
    return out


def edge_facts(quantity: np.ndarray, value: np.ndarray, edge: np.ndarray, edges: np.ndarray,
               sources: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(edge value, edge source, margin in dB to it) per row for the named edges.

    The margin is positive inside the window; NaN for rows other than optical power.
    """
    n = value.shape[0]
    col = EDGE_COLUMN[edge.astype(np.int64)]
    has = col >= 0
    rows = np.arange(n)
    safe = np.where(has, col, 0)
    ev = np.where(has, edges[rows, safe] if n else np.zeros(0), np.nan)
    es = np.where(has, sources[rows, safe] if n else np.zeros(0, dtype=np.int8),
                  int(WindowSource.NONE)).astype(np.int8)
    q = quantity.astype(np.int64)
    power = (q == _RXQ) | (q == _TXQ)
    high = np.isin(edge, [int(e) for e in Edge if e.high])
    with np.errstate(invalid="ignore"):
        margin = np.where(high, ev - value, value - ev)
    margin = np.where(power & has, margin, np.nan)
    return ev, es, margin


def _escape(part: str) -> str:
    return part.replace("%", "%25").replace("|", "%7C")


def alert_key(device: str, port: str, lane: int, quantity: Quantity) -> str:
    """Stable identity of one alert subject: "device|port|lane|quantity".

    No instance id in it, so two monitors watching the same device agree on it. "|" and
    "%" inside names are percent-escaped so that the key splits back unambiguously.
    """
    return f"{_escape(device)}|{_escape(port)}|{lane}|{Quantity(quantity).label}"


def split_alert_key(key: str) -> list[str]:
    """The parts of an ``alert_key`` (device, port, lane, quantity), unescaped."""
    return [p.replace("%7C", "|").replace("%25", "%") for p in key.split("|")]


class AlertKind(StrEnum):
    """Which step of an alert's life an event is; the values are the words we send."""

    OPEN = "open"
    UPDATE = "update"
    STALE = "stale"
    RESOLVE = "resolve"


@dataclass(slots=True, frozen=True)
class AlertEvent:
    """One step in the life of an alert about one (device, port, lane, quantity), or,
    with ``finding`` set, about a link's consistency (rules/consistency.py): then
    ``quantity`` and ``condition`` are None, ``lane`` is 0 and ``far_device``/``far_port``
    name the span's other end ("" for a finding about one module)."""

    kind: AlertKind
    key: str  # stable identity of the alert across its life and across instances
    sequence: int  # per-key counter; (key, sequence) is the idempotency key
    alertname: str  # e.g. "OpticRxNearOverload" (ours)
    severity: AlertSeverity
    device: str
    port: str
    lane: int
    quantity: Quantity | None  # None: a link finding, not a reading
    condition: Condition | None
    value: float | None
    unit: str
    edge_name: str  # "overload", "sensitivity", "high_alarm", ...
    edge_value: float | None
    window_source: WindowSource
    margin_db: float | None
    rate_per_day: float | None  # how fast the value has been moving, unit per day
    summary: str
    advice: str
    caution: str  # laser-safety caution when the advice means handling fibre or optics
    starts_at: float  # epoch seconds
    ends_at: float | None = None  # set on resolve
    at: float = 0.0  # when this event was produced
    finding: str = ""  # a consistency kind (rules.consistency.Mismatch word), or ""
    far_device: str = ""
    far_port: str = ""

    def __post_init__(self) -> None:
        # A word where a member belongs would surface later as a wrong label ("0" for
        # a quantity) or an AttributeError in a sender; refuse it here, by name.
        for name, kind in _EVENT_ENUMS:
            value = getattr(self, name)
            if value is None and self.finding and name in _LINK_NONE:
                continue
            if not isinstance(value, kind):
                raise TypeError(
                    f"alert event {self.key!r}: {name} must be a member of {kind.__name__}, "
                    f"got {value!r}"
                )


#: Fields a link finding's event leaves None (it is about no one reading).
_LINK_NONE = frozenset({"quantity", "condition"})
_EVENT_ENUMS: tuple[tuple[str, type], ...] = (
    ("kind", AlertKind),
    ("severity", AlertSeverity),
    ("quantity", Quantity),
    ("condition", Condition),
    ("window_source", WindowSource),
)
