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
}

#: severity per condition code, for vectorised sorting and "which rows may alert";
#: read-only, so no caller can quietly reorder the one table.
SEVERITY_OF = np.array([_SEVERITY[Condition(k)] for k in range(len(Condition))], dtype=np.int8)
SEVERITY_OF.flags.writeable = False


class WindowSource(IntEnum):
    """Which declaration supplied a reading's window edges (its provenance)."""

    NONE = 0  # nothing known: the reading is shown but not judged
    PMD_TABLE = 1  # IEEE 802.3 PMD table shipped with lightwarden
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
    WindowSource.PMD_TABLE: "pmd-table",
    WindowSource.MODULE: "module",
    WindowSource.SITE: "site",
    WindowSource.PRACTICE: "practice",
}
_SOURCE_BY_WORD = {w: s for s, w in _SOURCE_WORDS.items()}


@dataclass(slots=True)
class Assessment:
    """The rule layer's verdict on one ReadingBatch, aligned row for row with it.

    Edge arrays are NaN where the window has no such edge. For Rx power rows
    ``low_edge`` is the sensitivity and ``high_edge`` the overload; for other
    quantities they are the low/high alarm thresholds. Margins are in dB for power
    rows (NaN elsewhere): ``margin_high_db`` = high_edge - value (to overload),
    ``margin_low_db`` = value - low_edge (to sensitivity).
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
