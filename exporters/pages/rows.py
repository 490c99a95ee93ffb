"""One row per optic and lane, for `lightwarden check`, its JSON and the status page.

Folds the long-form Assessment (one row per quantity) into the wide form people read:
a lane's Rx/Tx/bias beside its module's temperature and supply, the Rx window edges and
margins, where the window came from, and the worst condition among them.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

from lightwarden.collector.readings import LANE_QUANTITIES, PollOutcome, Quantity, ReadingStatus
from lightwarden.exporters.pages.view import LinkLoss
from lightwarden.rules.advice import AdviceContext, advise
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.findings import (
    EDGE_COLUMNS,
    Assessment,
    Condition,
    Edge,
    Severity,
    WindowSource,
    split_alert_key,
)

#: How the six edge columns are named on an Rx row.
_RX_EDGE_NAMES = ("sensitivity", "overload", "low_alarm", "high_alarm", "low_warning",
                  "high_warning")
assert len(_RX_EDGE_NAMES) == len(EDGE_COLUMNS)


@dataclass(slots=True)
class OpticRow:
    device: str
    port: str
    lane: int
    pmd: str
    alias: str = ""
    rx_power_dbm: float | None = None
    tx_power_dbm: float | None = None
    bias_ma: float | None = None
    temperature_c: float | None = None
    supply_v: float | None = None
    rx_overload_dbm: float | None = None
    rx_sensitivity_dbm: float | None = None
    margin_to_overload_db: float | None = None
    margin_to_sensitivity_db: float | None = None
    window_source: str = "none"
    #: Both judgements' Rx edges, by edge name: {"value": dBm, "source": "standard"}
    rx_edges: dict[str, dict[str, object]] = field(default_factory=dict)
    #: The edge the worst condition is about: quantity, name, value, source, margin
    edge: dict[str, object] = field(default_factory=dict)
    cause: str = ""  # alert key of the reading that explains this one ("" if its own)
    pad_db: float | None = None  # the fixed attenuator the advice names, if any
    #: The span behind this lane (plant record): far end, loss measured both ways and
    #: the engineered loss, dB
    span: dict[str, object] = field(default_factory=dict)
    condition: str = Condition.HEALTHY.word
    severity: Severity = Severity.NONE
    notes: list[str] = field(default_factory=list)
    #: the subset of notes that explain a missing or odd value (shown in tables)
    value_notes: list[str] = field(default_factory=list)
    advice: str = ""  # what to do about the worst condition ("" when healthy)
    caution: str = ""  # the laser-safety caution, when the advice means handling optics
    worst_row: int = -1  # batch row of the worst condition seen so far
    #: seconds since these values were read, when they are from an earlier poll (the
    #: device's latest poll failed); None when fresh
    stale_s: float | None = None

    def as_json(self) -> dict[str, object]:
        out = {k: _rounded(getattr(self, k)) for k in self.__slots__ if k not in _NOT_IN_JSON}
        return out

    def worst_margin(self, overload_target: float, sensitivity_target: float) -> float:
        """Smallest margin left over its target (negative: target not met); inf if none."""
        left = []
        if self.margin_to_overload_db is not None:
            left.append(self.margin_to_overload_db - overload_target)
        if self.margin_to_sensitivity_db is not None:
            left.append(self.margin_to_sensitivity_db - sensitivity_target)
        return min(left) if left else math.inf


_NOT_IN_JSON = frozenset({"severity", "value_notes", "worst_row"})


def _rounded(v: object) -> object:
    if isinstance(v, float):
        return round(v, 3)
    if isinstance(v, dict):
        return {k: _rounded(x) for k, x in v.items()}
    return v


def worst_first(rows: list[OpticRow], targets: MarginTargets) -> None:
    """Sort in place: most severe first, then least margin left over its target."""
    rows.sort(key=lambda r: (-r.severity, r.worst_margin(targets.overload_db,
                                                         targets.sensitivity_db),
                             r.device, r.port, r.lane))


def _num(x: float) -> float | None:
    return None if math.isnan(x) else float(x)


_VALUE_FIELD = {
    Quantity.RX_POWER: "rx_power_dbm",
    Quantity.TX_POWER: "tx_power_dbm",
    Quantity.BIAS: "bias_ma",
    Quantity.TEMPERATURE: "temperature_c",
    Quantity.SUPPLY: "supply_v",
}

_STATUS_WORDS = {
    ReadingStatus.NO_LIGHT: "no light",
    ReadingStatus.UNAVAILABLE: "sensor unavailable",
    ReadingStatus.UNSUPPORTED: "not supported",
    ReadingStatus.INVALID: "invalid value",
}


def optic_rows(assessment: Assessment, targets: MarginTargets | None = None,
               contexts: Mapping[tuple[str, int, Quantity], AdviceContext] | None = None,
               links: Mapping[tuple[str, int], LinkLoss] | None = None,
               ) -> list[OpticRow]:
    """Wide rows, each with advice for its worst condition (margin ``targets`` for pads;
    ``contexts`` the far-end and span facts the monitor gathered, as the alerts use)."""
    targets = targets or MarginTargets()
    batch = assessment.batch
    rows: dict[tuple[int, int], OpticRow] = {}
    module: dict[int, list[int]] = {}
    for i in range(len(batch)):
        o, lane = int(batch.optic[i]), int(batch.lane[i])
        if lane == 0 and Quantity(int(batch.quantity[i])) not in LANE_QUANTITIES:
            module.setdefault(o, []).append(i)
            continue
        # lane 0 of a lane quantity: a total over all lanes, on a row of its own
        row = rows.get((o, lane))
        if row is None:
            optic = batch.optics[o]
            row = rows[(o, lane)] = OpticRow(
                device=optic.device, port=optic.port, lane=lane, pmd=optic.pmd,
                alias=optic.alias,
            )
        _fold(row, assessment, i)
    # Optics with module rows but no lane rows still get one line (lane 1).
    for o in module:
        if not any(k[0] == o for k in rows):
            optic = batch.optics[o]
            rows[(o, 1)] = OpticRow(device=optic.device, port=optic.port, lane=1,
                                    pmd=optic.pmd, alias=optic.alias)
    for (o, _lane), row in rows.items():
        for i in module.get(o, ()):
            _fold(row, assessment, i)
        for problem in batch.optics[o].problems:
            text = f"device problem: {problem}"
            if text not in row.notes:
                row.notes.append(text)
    for row in rows.values():
        if row.severity >= Severity.WARNING:
            _advise(row, assessment, targets, contexts or {})
        link = (links or {}).get((row.port, row.lane))
        if link is not None:
            row.span = {"far": link.far, "loss_in_db": link.loss_in_db,
                        "loss_out_db": link.loss_out_db, "engineered_db": link.engineered_db}
    return list(rows.values())


def cause_words(key: str) -> str:
    """An alert key ("dev|port|lane|quantity") as people read it: "dev port lane 1 Tx"."""
    parts = split_alert_key(key)
    if len(parts) != 4:
        return key
    device, port, lane, quantity = parts
    return f"{device} {port} lane {lane} {quantity.replace('_', ' ')}"


def _advise(row: OpticRow, a: Assessment, targets: MarginTargets,
            contexts: Mapping[tuple[str, int, Quantity], AdviceContext]) -> None:
    i = row.worst_row
    b = a.batch
    cause = a.cause.get(i)
    if cause:
        row.advice = (f"Explained by {cause_words(cause)}: act on that reading; this one "
                      "follows it.")
        return
    q = Quantity(int(b.quantity[i]))
    advice = advise(Condition(int(a.condition[i])), q,
                    float(b.value[i]), low_edge=float(a.low_edge[i]),
                    high_edge=float(a.high_edge[i]), targets=targets,
                    context=contexts.get((row.port, int(b.lane[i]), q)))
    row.pad_db = advice.pad_db
    row.advice, row.caution = advice.text, advice.caution


def _fold(row: OpticRow, a: Assessment, i: int) -> None:
    b = a.batch
    q = Quantity(int(b.quantity[i]))
    status = ReadingStatus(int(b.status[i]))
    setattr(row, _VALUE_FIELD[q], _num(float(b.value[i])))
    cond = Condition(int(a.condition[i]))
    if cond.severity > row.severity or (
        cond.severity == row.severity and row.condition == Condition.HEALTHY.word
    ):
        row.severity, row.condition, row.worst_row = cond.severity, cond.word, i
        row.cause = a.cause.get(i, "")
        row.edge = _edge_of(a, i, q)
    source = WindowSource(int(a.window_source[i]))
    if q is Quantity.RX_POWER:
        assert a.edge_sources is not None
        row.rx_edges = {
            name: {"value": float(v), "source": WindowSource(int(src)).word}
            for name, v, src in zip(_RX_EDGE_NAMES, a.edges[i].tolist(),
                                    a.edge_sources[i].tolist(), strict=True)
            if not math.isnan(v)
        }
        if a.oma_equivalent_dbm is not None and not math.isnan(a.oma_equivalent_dbm[i]):
            # beside the judged edges, marked derived: never an edge (rules/catalogue.py)
            row.rx_edges["sensitivity_from_oma"] = {
                "value": float(a.oma_equivalent_dbm[i]), "source": "standard, derived"}
        row.rx_overload_dbm = _num(float(a.high_edge[i]))
        row.rx_sensitivity_dbm = _num(float(a.low_edge[i]))
        row.margin_to_overload_db = _num(float(a.margin_high_db[i]))
        row.margin_to_sensitivity_db = _num(float(a.margin_low_db[i]))
        row.window_source = source.word
    for note in (b.notes.get(i), a.notes.get(i)):
        if note:
            text = f"{q.label}: {note}"
            if text not in row.notes:
                row.notes.append(text)
    if status is not ReadingStatus.OK:
        text = f"{q.label}: {b.notes.get(i) or _STATUS_WORDS.get(status, status.name.lower())}"
        if text not in row.notes:
            row.notes.append(text)
        row.value_notes.append(text)


def _edge_of(a: Assessment, i: int, q: Quantity) -> dict[str, object]:
    assert a.edge is not None and a.edge_value is not None and a.edge_source is not None
    assert a.edge_margin_db is not None
    edge = Edge(int(a.edge[i]))
    if edge is Edge.NONE:
        return {}
    return {"quantity": q.label, "name": edge.word, "value": _num(float(a.edge_value[i])),
            "source": WindowSource(int(a.edge_source[i])).word,
            "margin_db": _num(float(a.edge_margin_db[i]))}


def failed_device_row(outcome: PollOutcome) -> dict[str, object]:
    return {"device": outcome.device, "error": outcome.error, "error_kind": outcome.error_kind}
