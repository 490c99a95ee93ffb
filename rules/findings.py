"""What the rule layer hands to the exporters.

``Assessment`` is columnar and aligned row for row with the ``ReadingBatch`` it judges,
so an exporter walks the same arrays the collector filled. ``AlertEvent`` is one step in
an alert's life (open, update, stale, resolve), already carrying the words an operator
reads; delivery (Alertmanager, webhook, outbox) only moves it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import IntEnum

import numpy as np

from lightwarden.collector.readings import ReadingBatch


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

    @property
    def severity(self) -> Severity:
        """How bad, for "worst first" lists and alert severities."""
        return _SEVERITY[self]


class Severity(IntEnum):
    """The one severity order: everything that sorts or labels by severity reads it here."""

    NONE = 0
    INFO = 1  # no usable value: no evidence either way
    WARNING = 2
    CRITICAL = 3

    @property
    def word(self) -> str:
        return self.name.lower()


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

#: severity per condition code, for vectorised "which rows may alert"
SEVERITY_OF = np.array([int(_SEVERITY[c]) for c in sorted(Condition)], dtype=np.int8)

SEVERITY_WORDS = {int(s): s.word for s in Severity}


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


_SOURCE_WORDS = {
    WindowSource.NONE: "none",
    WindowSource.PMD_TABLE: "pmd-table",
    WindowSource.MODULE: "module",
    WindowSource.SITE: "site",
    WindowSource.PRACTICE: "practice",
}


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


@dataclass(slots=True, frozen=True)
class AlertEvent:
    """One step in the life of an alert about one (device, port, lane, quantity)."""

    kind: str  # "open" | "update" | "stale" | "resolve"
    key: str  # stable identity of the alert across its life and across instances
    sequence: int  # per-key counter; (key, sequence) is the idempotency key
    alertname: str  # e.g. "OpticRxNearOverload" (ours)
    severity: str  # "warning" | "critical"
    device: str
    port: str
    lane: int
    quantity: str  # Quantity.label
    condition: str  # Condition.word
    value: float | None
    unit: str
    edge_name: str  # "overload", "sensitivity", "high_alarm", ...
    edge_value: float | None
    window_source: str  # WindowSource.word
    margin_db: float | None
    rate_per_day: float | None  # how fast the value has been moving, unit per day
    summary: str
    advice: str
    caution: str  # laser-safety caution when the advice means handling fibre or optics
    starts_at: float  # epoch seconds
    ends_at: float | None = None  # set on resolve
    at: float = 0.0  # when this event was produced
