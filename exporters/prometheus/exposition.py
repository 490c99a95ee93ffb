"""Prometheus text exposition (format 0.0.4), rendered once per poll, served from cache.

Each device's poll is turned into sample lines once, when the poll lands
(:meth:`Exposition.update`), and kept as one ``bytes`` chunk per metric family. A scrape
only concatenates: for every family, its ``# HELP``/``# TYPE`` header once, then every
device's chunk for that family (the text format wants each family as one contiguous
group). The concatenated body is itself cached until the next update, so scrapes between
polls cost a dictionary look-up. Each chunk is also kept as its own gzip member, so a
gzip scrape only joins members (RFC 1952 allows a series of members). Open alerts are
small and change on their own clock, so they are rendered at scrape time and appended.

Choices (see exporters/prometheus/README.md for the catalogue):

- A row without a value never becomes a number: no NaN, no -inf for a dark receiver. It
  becomes one ``lightwarden_reading_unavailable{...,reason}`` sample instead, so every
  batch row yields exactly one of "a value sample" or "an unavailable sample".
- Conditions per reading are sparse: ``lightwarden_reading_condition`` has one series
  with value 1 for each reading at warning or worse, absent otherwise. Emitting 0 for
  every lane and quantity would add ~12 series per optic (over a million at 10^5
  optics) that carry almost no information. It is the rule layer's held condition, so
  the generated Prometheus rules and the pushed alerts share one definition.
- The optic's condition is one series carrying the current condition word (value 1),
  plus a numeric ``lightwarden_optic_severity`` for thresholds and sorting; a full
  state set would be nine series per optic.
- A failed poll drops that device's optic samples (a stale reading must not look like a
  fresh one) and keeps its health series; a partial poll (batch and error) exports the
  rows it did get and still counts the error.
"""

from __future__ import annotations

import gzip
import logging
import math
import threading
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from lightwarden.collector.readings import HEALTH_WORDS, PollOutcome, Quantity, ReadingStatus
from lightwarden.exporters.prometheus.self_metrics import SelfMetrics
from lightwarden.rules.consistency import Finding
from lightwarden.rules.findings import (
    SEVERITY_OF,
    AlertEvent,
    AlertKind,
    Assessment,
    Condition,
    Edge,
    Severity,
    WindowSource,
)

log = logging.getLogger(__name__)

CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"

# Family indices (one per cached chunk). Order here is the order in the exposition.
(
    F_RX_POWER,
    F_TX_POWER,
    F_BIAS,
    F_TEMPERATURE,
    F_SUPPLY,
    F_RX_OVERLOAD,
    F_RX_SENSITIVITY,
    F_MARGIN_OVERLOAD,
    F_MARGIN_SENSITIVITY,
    F_CONDITION,
    F_SEVERITY,
    F_READING_CONDITION,
    F_RX_LEVEL,
    F_INFO,
    F_UNAVAILABLE,
    F_DEVICE_UP,
    F_DEVICE_LAST_SUCCESS,
    F_DEVICE_POLL_DURATION,
    F_DEVICE_POLL_ERRORS,
    F_DEVICE_OPTICS,
    F_DEVICE_PROBLEMS,
    F_DEVICE_HEALTH,
) = range(22)

#: families about the device's polls, refreshed by every poll; the others hold readings
HEALTH_FAMILIES = frozenset({F_DEVICE_UP, F_DEVICE_LAST_SUCCESS, F_DEVICE_POLL_DURATION,
                             F_DEVICE_POLL_ERRORS, F_DEVICE_OPTICS, F_DEVICE_PROBLEMS,
                             F_DEVICE_HEALTH})


def escape_label_value(value: str) -> str:
    """Escape a label value for the text format: backslash, double quote, line feed."""
    if "\\" in value or '"' in value or "\n" in value:
        value = value.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")
    return value


def _escape_help(text: str) -> str:
    return text.replace("\\", "\\\\").replace("\n", "\\n")


@dataclass(slots=True, frozen=True)
class Family:
    name: str  # the exact name on sample lines (counters include _total)
    type: str  # "gauge" | "counter"
    help: str

    def header(self) -> bytes:
        return (
            f"# HELP {self.name} {_escape_help(self.help)}\n# TYPE {self.name} {self.type}\n"
        ).encode()


#: Per-device families, indexed by the F_* constants above.
DEVICE_FAMILIES: tuple[Family, ...] = (
    Family("lightwarden_rx_power_dbm", "gauge", "Received optical power per lane, dBm."),
    Family("lightwarden_tx_power_dbm", "gauge", "Transmitted optical power per lane, dBm."),
    Family("lightwarden_bias_amperes", "gauge", "Laser bias current per lane, amperes."),
    Family("lightwarden_temperature_celsius", "gauge", "Module temperature, degrees Celsius."),
    Family("lightwarden_supply_volts", "gauge", "Module supply voltage, volts."),
    Family(
        "lightwarden_rx_overload_dbm",
        "gauge",
        "Overload edge the lane's margin is measured to (the standard's where the PMD is "
        "known), dBm; window_source says who declared it.",
    ),
    Family(
        "lightwarden_rx_sensitivity_dbm",
        "gauge",
        "Sensitivity edge the lane's margin is measured to (the standard's where the PMD is "
        "known), dBm; window_source says who declared it.",
    ),
    Family(
        "lightwarden_rx_margin_to_overload_db",
        "gauge",
        "Overload edge minus received power, dB; small or negative means too much light.",
    ),
    Family(
        "lightwarden_rx_margin_to_sensitivity_db",
        "gauge",
        "Received power minus sensitivity edge, dB; small or negative means too little light.",
    ),
    Family(
        "lightwarden_optic_condition",
        "gauge",
        "Current condition of the optic (worst of its readings); one series, value 1.",
    ),
    Family(
        "lightwarden_optic_severity",
        "gauge",
        "Severity of the optic's condition: 0 fine, 1 unknown, 2 warning, 3 critical.",
    ),
    Family(
        "lightwarden_reading_condition",
        "gauge",
        "1 for each reading whose held condition is a warning or worse, with the edge it is "
        "about and its source; cause names the reading that explains it (empty: its own).",
    ),
    Family(
        "lightwarden_rx_level_dbm",
        "gauge",
        "Alarm and warning levels in force for the lane's Rx power (the module's own, or the "
        "site's), dBm.",
    ),
    Family(
        "lightwarden_optic_info",
        "gauge",
        "Identity of the optic in a port; value always 1.",
    ),
    Family(
        "lightwarden_reading_unavailable",
        "gauge",
        "1 for each reading the last poll could not give a value for, with the reason.",
    ),
    Family("lightwarden_device_up", "gauge",
           "1 if the last poll of the device read readings (fully or partly), else 0."),
    Family(
        "lightwarden_device_last_success_timestamp_seconds",
        "gauge",
        "When the readings of the last poll that read any were taken, Unix seconds.",
    ),
    Family(
        "lightwarden_device_poll_duration_seconds",
        "gauge",
        "How long the last poll of the device took, seconds.",
    ),
    Family(
        "lightwarden_device_poll_errors_total",
        "counter",
        "Failed or partial polls of the device since start, by kind of failure.",
    ),
    Family(
        "lightwarden_device_optics",
        "gauge",
        "Optics found in the device by the last successful poll.",
    ),
    Family(
        "lightwarden_device_problems",
        "gauge",
        "Things the device reports about its optics that cannot be right (two sensors for "
        "one lane, say), counted at the last successful poll; the page and check name them.",
    ),
    Family(
        "lightwarden_device_health",
        "gauge",
        "1 for the device's health after its last poll (up: all read; partial: some rows "
        "lost; down: nothing read), 0 for the other two.",
    ),
)

TARGET_OVERLOAD = Family(
    "lightwarden_rx_margin_target_overload_db",
    "gauge",
    "Configured margin to overload below which a receiver is judged near overload, dB.",
)
TARGET_SENSITIVITY = Family(
    "lightwarden_rx_margin_target_sensitivity_db",
    "gauge",
    "Configured margin to sensitivity below which a receiver is judged near sensitivity, dB.",
)
ALERT_OPEN = Family(
    "lightwarden_alert_open",
    "gauge",
    "1 for each alert lightwarden currently holds open.",
)
LINK_CONSISTENCY = Family(
    "lightwarden_link_consistency",
    "gauge",
    "1 for each consistency finding present (optics and plant that do not belong together).",
)

_N = len(DEVICE_FAMILIES)
_HEADERS: tuple[bytes, ...] = tuple(f.header() for f in DEVICE_FAMILIES)
_HEADERS_GZ: tuple[bytes, ...] = tuple(gzip.compress(h, 1, mtime=0) for h in _HEADERS)

# Value families per quantity, and the factor from reading units to exposition units.
_VALUE_FAMILY = {
    int(Quantity.RX_POWER): F_RX_POWER,
    int(Quantity.TX_POWER): F_TX_POWER,
    int(Quantity.BIAS): F_BIAS,
    int(Quantity.TEMPERATURE): F_TEMPERATURE,
    int(Quantity.SUPPLY): F_SUPPLY,
}
# Divide (not multiply by 1e-3): 43 / 1000 prints as 0.043, 43 * 1e-3 as 0.043000000000000003.
_DIVISOR = {int(q): 1.0 for q in Quantity}
_DIVISOR[int(Quantity.BIAS)] = 1000.0  # readings carry mA; Prometheus base unit is the ampere
_LANE_LABELLED = {
    int(q): q in (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS) for q in Quantity
}
_WITH_PMD = {int(Quantity.RX_POWER), int(Quantity.TX_POWER)}
_QUANTITY_LABEL = {int(q): q.label for q in Quantity}
_REASON = {int(s): s.name.lower() for s in ReadingStatus}
_CONDITION_WORD = {int(c): c.word for c in Condition}
_SOURCE_WORD = {int(s): s.word for s in WindowSource}
_RX = int(Quantity.RX_POWER)
_OK = int(ReadingStatus.OK)
_SOURCE_NONE = int(WindowSource.NONE)
_ALERTING = int(Severity.WARNING)
_EDGE_WORD = {int(e): e.word for e in Edge}
_LEVEL_WORDS = ("low_alarm", "high_alarm", "low_warning", "high_warning")


def format_value(value: float) -> str:
    """Shortest text that reads back as the same float (Go's ParseFloat accepts repr)."""
    return repr(float(value))


@dataclass(slots=True, frozen=True)
class ExpositionOptions:
    """What to put in the exposition. Defaults follow the metric catalogue."""

    #: Export window edges per Rx lane. Two series per Rx lane (about 2-3 x 10^5 series
    #: at 10^5 optics). They rarely change, so the TSDB stores them almost for free per
    #: sample, but each series still costs index memory in Prometheus; switch off at scale
    #: when the margins are enough (they already fold the edge in).
    window_edges: bool = True


@dataclass(slots=True, frozen=True)
class DeviceChunks:
    """One device's rendered sample lines, one bytes chunk per family (b"" when none)."""

    device: str
    chunks: tuple[bytes, ...]
    gz: tuple[bytes, ...]  # the same chunks, each one gzip member (b"" when empty)
    samples: int  # sample lines in all chunks together
    skipped_rows: int  # duplicate or malformed rows left out (see log)


@dataclass(slots=True)
class _Health:
    errors: dict[str, int] = field(default_factory=dict)
    last_success: float | None = None
    optics: int | None = None
    problems: int = 0
    duration: float = 0.0
    up: bool = False
    health: str = "down"


def render_device(
    outcome: PollOutcome,
    assessment: Assessment | None,
    options: ExpositionOptions | None = None,
) -> tuple[list[list[str]], int]:
    """Sample lines for the optic families of one poll, grouped by family index.

    Returns the lines and how many rows were left out (duplicates, bad indices).

    Health families are filled in by :class:`Exposition` (they need state across polls).
    Runs once per poll; the loop works on plain lists taken from the numpy columns.
    """
    options = options or ExpositionOptions()
    out: list[list[str]] = [[] for _ in range(_N)]
    batch = outcome.batch
    if batch is None:
        return out, 0
    n = len(batch)
    if assessment is not None and not _aligned(assessment, n, len(batch.optics)):
        log.error(
            "device %s: assessment does not line up with its batch (%d rows, %d optics);"
            " exporting readings without conditions",
            outcome.device,
            n,
            len(batch.optics),
        )
        assessment = None

    dev = escape_label_value(outcome.device)
    names = [f.name for f in DEVICE_FAMILIES]
    n_rx, n_tx, n_bias, n_temp, n_sup = names[F_RX_POWER : F_SUPPLY + 1]
    value_names = {
        int(Quantity.RX_POWER): n_rx,
        int(Quantity.TX_POWER): n_tx,
        int(Quantity.BIAS): n_bias,
        int(Quantity.TEMPERATURE): n_temp,
        int(Quantity.SUPPLY): n_sup,
    }

    # Per optic: the escaped label prefix, once. A port seen twice is kept once: two
    # optics with one port name would produce duplicate series and fail the scrape.
    optic_base: list[str | None] = []
    optic_pmd: list[str] = []
    seen_ports: set[str] = set()
    for opt in batch.optics:
        if opt.port in seen_ports:
            log.warning(
                "device %s: port %r reported twice; keeping the first", outcome.device, opt.port
            )
            optic_base.append(None)
            optic_pmd.append("")
            continue
        seen_ports.add(opt.port)
        optic_base.append(f'device="{dev}",port="{escape_label_value(opt.port)}"')
        optic_pmd.append(escape_label_value(opt.pmd))

    optic_col = batch.optic.tolist()
    lane_col = batch.lane.tolist()
    qty_col = batch.quantity.tolist()
    val_col = batch.value.tolist()
    st_col = batch.status.tolist()
    if assessment is not None:
        lo_col = assessment.low_edge.tolist()
        hi_col = assessment.high_edge.tolist()
        src_col = assessment.window_source.tolist()
        mlo_col = assessment.margin_low_db.tolist()
        mhi_col = assessment.margin_high_db.tolist()
        assert assessment.edge_sources is not None and assessment.edge is not None
        assert assessment.edge_source is not None
        esrc_rows = assessment.edge_sources.tolist()
        level_rows = assessment.edges[:, 2:].tolist()
        sev_col = SEVERITY_OF[assessment.condition.astype(np.int64)].tolist()
        cond_col = assessment.condition.tolist()
        edge_col = assessment.edge.tolist()
        edge_src_col = assessment.edge_source.tolist()
        causes = assessment.cause
    n_optics = len(batch.optics)
    rx_source: list[int | None] = [None] * n_optics

    o_val = out
    seen: set[tuple[int, int, int]] = set()
    skipped = 0
    isfinite = math.isfinite
    for i in range(n):
        o = optic_col[i]
        q = qty_col[i]
        if not (0 <= o < n_optics) or q not in _VALUE_FAMILY:
            skipped += 1
            continue
        base = optic_base[o]
        if base is None:
            skipped += 1
            continue
        lane = lane_col[i]
        key = (o, lane if _LANE_LABELLED[q] else 0, q)
        if key in seen:
            skipped += 1
            continue
        seen.add(key)
        st = st_col[i]
        if _LANE_LABELLED[q]:
            lbl = f'{base},lane="{lane}"'
        else:
            lbl = base
            lane = 0
        if st == _OK:
            v = val_col[i]
            if q in _WITH_PMD:
                o_val[_VALUE_FAMILY[q]].append(
                    f'{value_names[q]}{{{lbl},pmd="{optic_pmd[o]}"}} {v!r}\n'
                )
            else:
                o_val[_VALUE_FAMILY[q]].append(f"{value_names[q]}{{{lbl}}} {v / _DIVISOR[q]!r}\n")
        else:
            o_val[F_UNAVAILABLE].append(
                f'lightwarden_reading_unavailable{{{base},lane="{lane}",'
                f'quantity="{_QUANTITY_LABEL[q]}",reason="{_REASON.get(st, "invalid")}"}} 1\n'
            )
        if assessment is None:
            continue
        if sev_col[i] >= _ALERTING:
            # The one definition of each condition: the rule layer's held condition, the
            # same one the pushed alerts come from (alert_rules.py reads this family).
            word = _CONDITION_WORD.get(cond_col[i])
            if word is not None:
                cause = escape_label_value(causes.get(i, ""))
                o_val[F_READING_CONDITION].append(
                    f'lightwarden_reading_condition{{{base},lane="{lane}",'
                    f'quantity="{_QUANTITY_LABEL[q]}",condition="{word}",'
                    f'edge="{_EDGE_WORD.get(edge_col[i], "")}",'
                    f'source="{_SOURCE_WORD.get(edge_src_col[i], "none")}",cause="{cause}"}} 1\n'
                )
        if q == _RX:
            src = src_col[i]
            if rx_source[o] is None:
                rx_source[o] = src
            if options.window_edges and src != _SOURCE_NONE:
                esrc = esrc_rows[i]
                hi = hi_col[i]
                lo = lo_col[i]
                if isfinite(hi):
                    o_val[F_RX_OVERLOAD].append(
                        f'lightwarden_rx_overload_dbm{{{lbl},window_source='
                        f'"{_SOURCE_WORD.get(esrc[1], "none")}"}} {hi!r}\n'
                    )
                if isfinite(lo):
                    o_val[F_RX_SENSITIVITY].append(
                        f'lightwarden_rx_sensitivity_dbm{{{lbl},window_source='
                        f'"{_SOURCE_WORD.get(esrc[0], "none")}"}} {lo!r}\n'
                    )
                for k, lv in enumerate(level_rows[i]):
                    if isfinite(lv):
                        o_val[F_RX_LEVEL].append(
                            f'lightwarden_rx_level_dbm{{{lbl},level="{_LEVEL_WORDS[k]}",'
                            f'source="{_SOURCE_WORD.get(esrc[2 + k], "none")}"}} {lv!r}\n'
                        )
            m = mhi_col[i]
            if isfinite(m):
                o_val[F_MARGIN_OVERLOAD].append(
                    f"lightwarden_rx_margin_to_overload_db{{{lbl}}} {m!r}\n"
                )
            m = mlo_col[i]
            if isfinite(m):
                o_val[F_MARGIN_SENSITIVITY].append(
                    f"lightwarden_rx_margin_to_sensitivity_db{{{lbl}}} {m!r}\n"
                )

    conditions = assessment.optic_condition.tolist() if assessment is not None else None
    for o, opt in enumerate(batch.optics):
        base = optic_base[o]
        if base is None:
            continue
        src = rx_source[o]
        sw = _SOURCE_WORD.get(src, "") if src is not None else ""
        wl = "" if opt.wavelength_nm is None else _format_wavelength(opt.wavelength_nm)
        out[F_INFO].append(
            f'lightwarden_optic_info{{{base},pmd="{optic_pmd[o]}",'
            f'form_factor="{escape_label_value(opt.form_factor)}",'
            f'part_number="{escape_label_value(opt.part_number)}",'
            f'serial="{escape_label_value(opt.serial)}",wavelength_nm="{wl}",'
            f'window_source="{sw}",alias="{escape_label_value(opt.alias)}"}} 1\n'
        )
        if conditions is not None:
            c = conditions[o]
            word = _CONDITION_WORD.get(c)
            if word is None:
                log.warning("device %s: unknown condition code %r", outcome.device, c)
                continue
            out[F_CONDITION].append(f'lightwarden_optic_condition{{{base},condition="{word}"}} 1\n')
            out[F_SEVERITY].append(
                f"lightwarden_optic_severity{{{base}}} {SEVERITY_OF[c]}\n"
            )
    if skipped:
        log.warning(
            "device %s: %d rows left out of the exposition (duplicate or malformed)",
            outcome.device,
            skipped,
        )
    return out, skipped


def _render_from(source: Callable[[], Iterable[Any]] | None,
                 render: Callable[[list[Any]], bytes], name: str, what: str) -> bytes:
    """A family rendered at scrape time from ``source``; b"" when there is none, and when
    the source fails (logged): a broken source must not break the scrape."""
    if source is None:
        return b""
    try:
        items = list(source())
    except Exception as exc:
        log.error("%s failed (%s); %s left out of this scrape", name, type(exc).__name__, what)
        return b""
    return render(items)


def _format_wavelength(nm: float) -> str:
    if not math.isfinite(nm):
        return ""
    return str(int(nm)) if float(nm).is_integer() else f"{nm:g}"


def _aligned(a: Assessment, rows: int, optics: int) -> bool:
    row_arrays = (
        a.low_edge,
        a.high_edge,
        a.window_source,
        a.margin_low_db,
        a.margin_high_db,
        a.condition,
    )
    return all(x.shape[0] == rows for x in row_arrays) and a.optic_condition.shape[0] == optics


AlertSource = Callable[[], Iterable[AlertEvent]]


class Exposition:
    """The cached Prometheus text for every device, assembled on demand.

    Thread-safe: :meth:`update` is called by the poller (any thread), :meth:`body` and
    :meth:`body_gzip` by HTTP handler threads.
    """

    def __init__(
        self,
        *,
        margin_target_overload_db: float | None = None,
        margin_target_sensitivity_db: float | None = None,
        alerts: AlertSource | None = None,
        options: ExpositionOptions | None = None,
        gzip_level: int = 1,
    ) -> None:
        self._options = options or ExpositionOptions()
        self._alerts = alerts
        self._links: Callable[[], Iterable[Finding]] | None = None
        self._gzip_level = gzip_level
        self._lock = threading.Lock()
        self._devices: dict[str, DeviceChunks] = {}
        self._health: dict[str, _Health] = {}
        self._generation = 0
        self._cached: tuple[int, bytes] | None = None
        self._cached_gz: tuple[int, bytes] | None = None
        self._targets = b""
        self._self: SelfMetrics | None = None
        self._extra: Callable[[], bytes] | None = None
        self.set_margin_targets(margin_target_overload_db, margin_target_sensitivity_db)

    # -- input -------------------------------------------------------------------------

    def set_margin_targets(self, overload_db: float | None, sensitivity_db: float | None) -> None:
        parts: list[bytes] = []
        for fam, v in ((TARGET_OVERLOAD, overload_db), (TARGET_SENSITIVITY, sensitivity_db)):
            if v is not None and math.isfinite(v):
                parts.append(fam.header() + f"{fam.name} {format_value(v)}\n".encode())
        with self._lock:
            self._targets = b"".join(parts)
            self._generation += 1

    def set_alert_source(self, alerts: AlertSource | None) -> None:
        self._alerts = alerts

    def set_extra_source(self, source: Callable[[], bytes] | None) -> None:
        """Text rendered elsewhere (the drift gauges) appended to every scrape."""
        self._extra = source

    def set_link_source(self, links: Callable[[], Iterable[Finding]] | None) -> None:
        """Consistency findings, rendered at scrape time like the open alerts."""
        self._links = links

    def set_self_metrics(self, self_metrics: SelfMetrics | None) -> None:
        """Append the monitor's own figures (process, polls, scrape cost) to every scrape."""
        self._self = self_metrics

    def update(self, outcome: PollOutcome, assessment: Assessment | None = None,
               keep_readings: bool = False) -> DeviceChunks:
        """Render one poll of one device and replace that device's cached text.

        ``keep_readings``: a failed poll keeps the readings of the last one that read
        any (the monitor withdraws them once they are older than its stale age)."""
        lines, skipped = render_device(outcome, assessment, self._options)
        device = outcome.device
        dev = escape_label_value(device)
        with self._lock:
            h = self._health.get(device)
            if h is None:
                h = self._health[device] = _Health()
            h.up = outcome.batch is not None
            h.health = outcome.health
            h.duration = outcome.duration_s
            if outcome.error or outcome.batch is None:
                kind = outcome.error_kind or "other"
                h.errors[kind] = h.errors.get(kind, 0) + 1
            if outcome.batch is not None:
                h.last_success = outcome.batch.taken_at
                h.optics = len(outcome.batch.optics)
                h.problems = sum(len(o.problems) for o in outcome.batch.optics)
            health = (h.up, h.duration, h.last_success, h.optics, sorted(h.errors.items()),
                      h.problems, h.health)
        up, duration, last_success, optics, errors, problems, word = health
        lines[F_DEVICE_UP].append(f'lightwarden_device_up{{device="{dev}"}} {int(up)}\n')
        if math.isfinite(duration):
            lines[F_DEVICE_POLL_DURATION].append(
                f'lightwarden_device_poll_duration_seconds{{device="{dev}"}}'
                f" {format_value(duration)}\n"
            )
        if last_success is not None:
            lines[F_DEVICE_LAST_SUCCESS].append(
                f'lightwarden_device_last_success_timestamp_seconds{{device="{dev}"}}'
                f" {format_value(last_success)}\n"
            )
        if optics is not None:
            lines[F_DEVICE_OPTICS].append(f'lightwarden_device_optics{{device="{dev}"}} {optics}\n')
            lines[F_DEVICE_PROBLEMS].append(
                f'lightwarden_device_problems{{device="{dev}"}} {problems}\n')
        for w in HEALTH_WORDS:
            lines[F_DEVICE_HEALTH].append(
                f'lightwarden_device_health{{device="{dev}",health="{w}"}} {int(w == word)}\n')
        for kind, count in errors:
            lines[F_DEVICE_POLL_ERRORS].append(
                f'lightwarden_device_poll_errors_total{{device="{dev}",'
                f'kind="{escape_label_value(kind)}"}} {count}\n'
            )
        plain = tuple("".join(ls).encode("utf-8", "replace") for ls in lines)
        level = self._gzip_level
        gz = tuple(_gz(c, level) if c else b"" for c in plain)
        samples = sum(len(ls) for ls in lines)
        with self._lock:
            old = self._devices.get(device)
            if keep_readings and outcome.batch is None and old is not None:
                keep = [i not in HEALTH_FAMILIES for i in range(_N)]
                plain = tuple(o if k else c for o, c, k in zip(old.chunks, plain, keep,
                                                                 strict=True))
                gz = tuple(o if k else c for o, c, k in zip(old.gz, gz, keep, strict=True))
                samples = sum(c.count(b"\n") for c in plain)
            chunks = DeviceChunks(device=device, chunks=plain, gz=gz, samples=samples,
                                  skipped_rows=skipped)
            self._devices[device] = chunks
            self._generation += 1
        return chunks

    def remove(self, device: str) -> None:
        """Forget a device (taken out of the config): its series end at the next scrape."""
        with self._lock:
            self._devices.pop(device, None)
            self._health.pop(device, None)
            self._generation += 1

    def devices(self) -> list[str]:
        with self._lock:
            return sorted(self._devices)

    # -- output ------------------------------------------------------------------------

    def _device_part(self, compressed: bool) -> bytes:
        """Targets plus every device family, from cache unless something changed."""
        with self._lock:
            gen = self._generation
            cached = self._cached_gz if compressed else self._cached
            if cached is not None and cached[0] == gen:
                return cached[1]
            devices = [self._devices[d] for d in sorted(self._devices)]
            targets = self._targets
        if compressed:
            rows = [d.gz for d in devices]
            headers = _HEADERS_GZ
            parts: list[bytes] = [_gz(targets, self._gzip_level)] if targets else []
        else:
            rows = [d.chunks for d in devices]
            headers = _HEADERS
            parts = [targets]
        for f in range(_N):
            fam = [c[f] for c in rows if c[f]]
            if fam:
                parts.append(headers[f])
                parts.extend(fam)
        body = b"".join(parts)
        with self._lock:
            if self._generation == gen:
                if compressed:
                    self._cached_gz = (gen, body)
                else:
                    self._cached = (gen, body)
        return body

    def alerts_text(self) -> bytes:
        """The open-alert family, rendered now from the alert source (b"" when none)."""
        return _render_from(self._alerts, render_alerts, "alert source", "open alerts")

    def scrape(self, compressed: bool = False) -> list[bytes]:
        """The exposition as parts to send back to back (no copy of the large body).

        With ``compressed`` every part is one or more gzip members. Each device chunk was
        compressed once when its poll landed, so a scrape only joins members; RFC 1952
        allows a gzip file to be a series of members, and HTTP clients (Go's, used by
        Prometheus, and Python's) read them as one stream.
        """
        own = self._self
        if own is None:
            return self._scrape(compressed)
        parts = own.timed(lambda: self._scrape(compressed))
        text = own.render()
        parts.append(_gz(text, self._gzip_level) if compressed else text)
        return parts

    def _scrape(self, compressed: bool) -> list[bytes]:
        parts = [self._device_part(compressed)]
        extra = self._extra() if self._extra is not None else b""
        for text in (self.alerts_text(), self.links_text(), extra):
            if text:
                parts.append(_gz(text, self._gzip_level) if compressed else text)
        return parts

    def links_text(self) -> bytes:
        """The consistency family, rendered now from the link source (b"" when none)."""
        return _render_from(self._links, render_links, "link source", "findings")

    def body(self) -> bytes:
        """The full exposition, text format 0.0.4, as one bytes object."""
        return b"".join(self.scrape(False))

    def body_gzip(self) -> bytes:
        """The full exposition gzip-compressed, as one bytes object."""
        return b"".join(self.scrape(True))


def _gz(data: bytes, level: int) -> bytes:
    return gzip.compress(data, compresslevel=level, mtime=0)


def render_alerts(events: Iterable[AlertEvent]) -> bytes:
    """``lightwarden_alert_open`` lines for events that are not resolves.

    One series per label set, so a list holding several events of one alert does not
    produce duplicate series.
    """
    lines: list[str] = []
    seen: set[tuple[str, ...]] = set()
    for ev in events:
        if ev.kind is AlertKind.RESOLVE or ev.quantity is None:
            continue  # link findings have their own family (render_links)
        labels = (
            ev.alertname,
            ev.severity.value,
            ev.device,
            ev.port,
            str(ev.lane),
            ev.quantity.label,
        )
        if labels in seen:
            continue
        seen.add(labels)
        a, s, d, p, ln, q = (escape_label_value(x) for x in labels)
        lines.append(
            f'lightwarden_alert_open{{alertname="{a}",severity="{s}",device="{d}",port="{p}",'
            f'lane="{ln}",quantity="{q}"}} 1\n'
        )
    if not lines:
        return b""
    return ALERT_OPEN.header() + "".join(lines).encode("utf-8", "replace")


def render_links(findings: Iterable[Finding]) -> bytes:
    """``lightwarden_link_consistency`` lines, one per finding (value 1 while present)."""
    lines: list[str] = []
    seen: set[str] = set()
    for f in findings:
        if f.key in seen:
            continue
        seen.add(f.key)
        d, p, fd, fp, k, s = (escape_label_value(x) for x in (
            f.device, f.port, f.far_device, f.far_port, f.kind.value, f.severity.word))
        lines.append(
            f'lightwarden_link_consistency{{device="{d}",port="{p}",far_device="{fd}",'
            f'far_port="{fp}",kind="{k}",severity="{s}"}} 1\n'
        )
    if not lines:
        return b""
    return LINK_CONSISTENCY.header() + "".join(lines).encode("utf-8", "replace")
