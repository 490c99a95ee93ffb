"""Span loss measured from both ends' diagnostics, against the engineered loss budget.

(Whether the two ends' optics belong together is rules/consistency.py.)

Measured loss A->B is Tx(A) - Rx(B) per lane. Engineered loss follows the link
attenuation form of ITU-T G.652 Appendix I: A = alpha*L + splices*a_s + connectors*a_c,
plus any fixed pads in the path. Digital diagnostics are only good to about +-3 dB per
reading (SFF-8472, from memory), so one sample says little: judge the median of several
and watch how it moves against its own baseline.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch, ReadingStatus

SINGLEMODE = frozenset({"OS1", "OS1A", "OS2"})
MULTIMODE = frozenset({"OM1", "OM2", "OM3", "OM4", "OM5"})


@dataclass(slots=True, frozen=True)
class PlanningCoefficients:
    """Per-km, per-connector and per-splice losses used when a span has no measured budget.

    Defaults are the planning values in standards.md "Fibre plant" (practice); the
    multimode 1300 nm figure is the TIA-568 cable maximum (partly verified) because the
    practice row gives none.
    """

    sm_1310_db_per_km: float = 0.4
    sm_1550_db_per_km: float = 0.25
    mm_850_db_per_km: float = 3.0
    mm_1300_db_per_km: float = 1.5
    connector_db: float = 0.5  # per mated pair
    splice_db: float = 0.1  # per fusion splice


DEFAULT_COEFFICIENTS = PlanningCoefficients()


@dataclass(slots=True)
class PlantSpan:
    """One fibre span as the plant record describes it, from port A to port B."""

    a_device: str
    a_port: str
    b_device: str
    b_port: str
    length_km: float
    fibre: str  # "OS2", "OM3", "OM4", ...
    wavelength_nm: float
    connectors: int = 2  # mated pairs in the path, patch panels included
    splices: int = 0
    #: fixed attenuators fitted on purpose, each at one receiver: at A's (it counts in
    #: the B -> A direction only) and at B's (A -> B)
    pad_a_db: float = 0.0
    pad_b_db: float = 0.0
    #: mode-conditioning patch cords fitted at both ends (1000BASE-LX on multimode fibre)
    mode_conditioning: bool = False
    #: where ``wavelength_nm`` came from: "record" (the plant entry), "pmd" (the middle
    #: of an end's PMD band) or "assumed" (the fibre's commonest window: say so)
    wavelength_from: str = "record"

    @property
    def name(self) -> str:
        return f"{self.a_device} {self.a_port} -> {self.b_device} {self.b_port}"


def link_attenuation_db(
    length_km: float,
    fibre_db_per_km: float,
    connectors: int,
    connector_db: float,
    splices: int,
    splice_db: float,
    pad_db: float = 0.0,
) -> float:
    """A = alpha*L + splices*a_s + connectors*a_c (+ pads): ITU-T G.652 Appendix I form."""
    return fibre_db_per_km * length_km + splices * splice_db + connectors * connector_db + pad_db


def fibre_db_per_km(
    fibre: str, wavelength_nm: float, coeffs: PlanningCoefficients = DEFAULT_COEFFICIENTS
) -> float:
    """Planning attenuation of one fibre type in the band the wavelength falls in."""
    kind = fibre.strip().upper()
    if kind in SINGLEMODE:
        # 1400 nm splits the O band (1260-1360) from the C/L bands (1530-1625).
        return coeffs.sm_1310_db_per_km if wavelength_nm < 1400.0 else coeffs.sm_1550_db_per_km
    if kind in MULTIMODE:
        return coeffs.mm_850_db_per_km if wavelength_nm < 1000.0 else coeffs.mm_1300_db_per_km
    known = ", ".join(sorted(SINGLEMODE | MULTIMODE))
    raise ValueError(f"unknown fibre type {fibre!r} (expected one of {known})")


def engineered_loss_db(
    span: PlantSpan, coeffs: PlanningCoefficients = DEFAULT_COEFFICIENTS,
    direction: str = "a->b",
) -> float:
    """The loss one direction of the span was built to have, from its plant record: the
    fibre, connectors and splices, plus the pad at that direction's receiver."""
    for field_name in ("length_km", "pad_a_db", "pad_b_db", "wavelength_nm"):
        value = getattr(span, field_name)
        if not math.isfinite(value) or value < 0:
            raise ValueError(f"span {span.name}: {field_name} must be a number >= 0, got {value!r}")
    if span.connectors < 0 or span.splices < 0:
        raise ValueError(f"span {span.name}: connectors and splices must be >= 0")
    if direction not in ("a->b", "b->a"):
        raise ValueError(f"span {span.name}: direction must be 'a->b' or 'b->a', not {direction!r}")
    try:
        alpha = fibre_db_per_km(span.fibre, span.wavelength_nm, coeffs)
    except ValueError as exc:
        raise ValueError(f"span {span.name}: {exc}") from None
    return link_attenuation_db(
        span.length_km,
        alpha,
        span.connectors,
        coeffs.connector_db,
        span.splices,
        coeffs.splice_db,
        span.pad_b_db if direction == "a->b" else span.pad_a_db,
    )


# --- measured loss -------------------------------------------------------------------


@dataclass(slots=True, frozen=True)
class SpanLossSample:
    """Loss of one direction of a span at one poll, per lane (NaN where a side had no value)."""

    direction: str  # "a->b" or "b->a"
    lanes: np.ndarray  # int16, 1-based
    loss_db: np.ndarray  # float64
    taken_at: float


def lane_values(batch: ReadingBatch, port: str, quantity: Quantity) -> dict[int, float]:
    """lane -> value of one quantity on one port; NaN where the row is not OK."""
    optics = [i for i, o in enumerate(batch.optics) if o.port == port]
    if not optics:
        return {}
    rows = np.flatnonzero(np.isin(batch.optic, optics) & (batch.quantity == int(quantity)))
    ok = batch.status[rows] == int(ReadingStatus.OK)
    vals = np.where(ok, batch.value[rows], np.nan)
    return {int(batch.lane[r]): float(v) for r, v in zip(rows, vals, strict=True)}


def measure_span_loss(
    span: PlantSpan, tx_batch: ReadingBatch, rx_batch: ReadingBatch, direction: str = "a->b"
) -> SpanLossSample:
    """Tx(sending end) - Rx(receiving end) per lane, pairing lanes by number.

    Lanes are paired by number because both parallel (MPO) and WDM optics keep lane i
    of one end facing lane i of the other under the usual polarity.
    """
    if direction == "a->b":
        tx_dev, tx_port, rx_dev, rx_port = span.a_device, span.a_port, span.b_device, span.b_port
    elif direction == "b->a":
        tx_dev, tx_port, rx_dev, rx_port = span.b_device, span.b_port, span.a_device, span.a_port
    else:
        raise ValueError(f"span {span.name}: direction must be 'a->b' or 'b->a', not {direction!r}")
    if tx_batch.device != tx_dev or rx_batch.device != rx_dev:
        raise ValueError(
            f"span {span.name} {direction}: expected batches from {tx_dev} and {rx_dev}, "
            f"got {tx_batch.device} and {rx_batch.device}"
        )
    tx = lane_values(tx_batch, tx_port, Quantity.TX_POWER)
    rx = lane_values(rx_batch, rx_port, Quantity.RX_POWER)
    lanes = sorted(set(tx) & set(rx))
    loss = np.array([tx[lane] - rx[lane] for lane in lanes], dtype=np.float64)
    return SpanLossSample(
        direction=direction,
        lanes=np.asarray(lanes, dtype=np.int16),
        loss_db=loss,
        taken_at=max(tx_batch.taken_at, rx_batch.taken_at),
    )


@dataclass(slots=True, frozen=True)
class SpanVerdict:
    verdict: str  # "within budget" | "excess loss" | "below budget" | "not enough samples"
    measured_db: float  # median of the samples given (NaN when none)
    engineered_db: float
    excess_db: float  # measured - engineered
    samples: int


WITHIN_BUDGET = "within budget"
EXCESS_LOSS = "excess loss"
BELOW_BUDGET = "below budget"
NOT_ENOUGH = "not enough samples"


def judge_span_loss(
    samples: np.ndarray,
    engineered_db: float,
    *,
    tolerance_db: float = 1.5,
    min_samples: int = 5,
) -> SpanVerdict:
    """Compare the median measured loss of one lane/direction with its engineered loss.

    1.5 dB default tolerance: two dirty or damaged connectors (0.75 dB each at the
    TIA-568 maximum) or the smallest stocked pad stay visible, while sample noise is
    removed by the median. The fixed calibration offset of the two modules (up to
    +-3 dB each, from memory) is not removed by a median; that is why "excess loss" asks
    for a check and why growth against the span's own baseline
    (``span_loss_growth``) is the stronger signal.
    """
    vals = np.asarray(samples, dtype=np.float64).ravel()
    vals = vals[np.isfinite(vals)]
    if vals.size < min_samples:
        measured = float(np.median(vals)) if vals.size else math.nan
        return SpanVerdict(
            NOT_ENOUGH, measured, engineered_db, measured - engineered_db, int(vals.size)
        )
    measured = float(np.median(vals))
    excess = measured - engineered_db
    if excess > tolerance_db:
        verdict = EXCESS_LOSS
    elif excess < -tolerance_db:
        verdict = BELOW_BUDGET  # a planned pad missing, or a plant record that is wrong
    else:
        verdict = WITHIN_BUDGET
    return SpanVerdict(verdict, measured, engineered_db, excess, int(vals.size))


def span_loss_growth(
    baseline: np.ndarray, recent: np.ndarray, *, min_samples: int = 3
) -> float | None:
    """How much the median loss grew from its baseline samples to its recent ones, in dB.

    Both sets come from the same pair of modules, so their calibration offsets cancel:
    this is the figure to trust over the absolute comparison with the budget.
    """
    b = np.asarray(baseline, dtype=np.float64).ravel()
    r = np.asarray(recent, dtype=np.float64).ravel()
    b = b[np.isfinite(b)]
    r = r[np.isfinite(r)]
    if b.size < min_samples or r.size < min_samples:
        return None
    return float(np.median(r) - np.median(b))
