"""Will a link close, and with which pad? The power budget of a link not yet built.

Each direction is judged on its own: the transmitting end's Tx window (IEEE 802.3 row of
its PMD), the receiving end's Rx window, and the engineered loss of the span at the
transmitter's wavelength (ITU-T G.652 Appendix I form: fibre per km x length +
connectors + splices, plus a pad recorded at that receiver). The pad advice is
rules/pads.py's worst-case rule with the planning corners (Tx max and Tx min minus the
loss), the same rule live links use.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

from lightwarden.rules.catalogue import PmdSpec
from lightwarden.rules.pads import STOCKED_PADS_DB, Corners, PadTargets, Verdict, choose_pad
from lightwarden.rules.spanloss import (
    DEFAULT_COEFFICIENTS,
    MULTIMODE,
    SINGLEMODE,
    PlanningCoefficients,
    fibre_db_per_km,
    link_attenuation_db,
)


@dataclass(slots=True, frozen=True)
class SpanPlan:
    """The span as it will be built. ``connectors`` counts mated pairs."""

    length_km: float
    fibre: str = "OS2"
    connectors: int = 2
    splices: int = 0
    pad_a_db: float = 0.0  # a pad fitted at A's receiver (counts in the B -> A direction)
    pad_b_db: float = 0.0

    def __post_init__(self) -> None:
        for name in ("length_km", "pad_a_db", "pad_b_db"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0):
                raise ValueError(f"{name} must be a number >= 0, got {value!r}")
        for name in ("connectors", "splices"):
            if getattr(self, name) < 0:
                raise ValueError(f"{name} must be 0 or more, got {getattr(self, name)!r}")
        kind = self.fibre.strip().upper()
        if kind not in SINGLEMODE | MULTIMODE:
            known = ", ".join(sorted(SINGLEMODE | MULTIMODE))
            raise ValueError(f"fibre {self.fibre!r} is not one of {known}")


@dataclass(slots=True, frozen=True)
class Direction:
    from_end: str  # "a" or "b"
    to_end: str
    tx_pmd: str
    rx_pmd: str
    wavelength_nm: float
    loss_db: float  # engineered loss of this direction, its recorded pad included
    power_budget_db: float  # Tx min - Rx sensitivity
    rx_min_dbm: float  # Tx window - loss, before any advised pad
    rx_max_dbm: float
    margin_to_sensitivity_db: float  # at the low corner, the advised pad fitted
    margin_to_overload_db: float  # at the high corner, the advised pad fitted
    pad_db: float | None
    verdict: Verdict
    reason: str

    def as_json(self) -> dict[str, object]:
        def r(x: float) -> float | None:
            return round(x, 2) if math.isfinite(x) else None

        return {
            "from": self.from_end, "to": self.to_end, "tx_pmd": self.tx_pmd,
            "rx_pmd": self.rx_pmd, "wavelength_nm": r(self.wavelength_nm),
            "loss_db": r(self.loss_db), "power_budget_db": r(self.power_budget_db),
            "rx_expected_dbm": {"min": r(self.rx_min_dbm), "max": r(self.rx_max_dbm)},
            "margin_to_sensitivity_db": r(self.margin_to_sensitivity_db),
            "margin_to_overload_db": r(self.margin_to_overload_db),
            "pad_db": self.pad_db, "verdict": self.verdict.value, "reason": self.reason,
        }


@dataclass(slots=True, frozen=True)
class BudgetPlan:
    engineered_loss_db: float  # the span without pads, at the A end's wavelength
    directions: tuple[Direction, ...]
    notes: tuple[str, ...] = field(default=())

    @property
    def verdict(self) -> Verdict:
        order = [Verdict.OK, Verdict.PAD, Verdict.SHORT, Verdict.FAILS]
        return max((d.verdict for d in self.directions), key=order.index)

    def as_json(self) -> dict[str, object]:
        return {"engineered_loss_db": round(self.engineered_loss_db, 2),
                "verdict": self.verdict.value,
                "directions": [d.as_json() for d in self.directions],
                "notes": list(self.notes)}


def _wavelength(spec: PmdSpec) -> float:
    if spec.wavelength_min_nm is None or spec.wavelength_max_nm is None:
        raise ValueError(f"PMD {spec.name}: its table row has no wavelength band")
    return (spec.wavelength_min_nm + spec.wavelength_max_nm) / 2


def _window(spec: PmdSpec, what: str) -> None:
    missing = [c for c in ("tx_min_dbm", "tx_max_dbm", "rx_min_avg_dbm", "rx_overload_dbm")
               if getattr(spec, c) is None]
    if missing:
        raise ValueError(f"PMD {spec.name} ({what}): its table row lacks {', '.join(missing)}")


def plan_link(
    a: PmdSpec,
    b: PmdSpec,
    span: SpanPlan,
    *,
    coefficients: PlanningCoefficients = DEFAULT_COEFFICIENTS,
    targets: PadTargets | None = None,
    steps: Sequence[float] = STOCKED_PADS_DB,
) -> BudgetPlan:
    """Both directions of a planned link (module doc). Raises ValueError naming what is
    missing or wrong (an unknown fibre, a PMD row without a window)."""
    targets = targets or PadTargets()
    _window(a, "end a")
    _window(b, "end b")
    notes: list[str] = []
    if a.name.upper() != b.name.upper():
        notes.append(f"the two ends are different PMDs ({a.name} and {b.name})")
    directions = []
    for tx, rx, frm, to, pad in ((a, b, "a", "b", span.pad_b_db), (b, a, "b", "a", span.pad_a_db)):
        wl = _wavelength(tx)
        if rx.wavelength_min_nm is not None and rx.wavelength_max_nm is not None and not (
                rx.wavelength_min_nm - 20 <= wl <= rx.wavelength_max_nm + 20):
            notes.append(f"{frm} transmits about {wl:.0f} nm, outside {rx.name}'s band "
                         f"{rx.wavelength_min_nm:.0f}-{rx.wavelength_max_nm:.0f} nm")
        alpha = fibre_db_per_km(span.fibre, wl, coefficients)
        loss = link_attenuation_db(span.length_km, alpha, span.connectors,
                                   coefficients.connector_db, span.splices,
                                   coefficients.splice_db, pad)
        assert tx.tx_min_dbm is not None and tx.tx_max_dbm is not None
        assert rx.rx_min_avg_dbm is not None and rx.rx_overload_dbm is not None
        corners = Corners(tx.tx_max_dbm - loss, tx.tx_min_dbm - loss,
                          f"{tx.name} Tx maximum less {loss:.1f} dB",
                          f"{tx.name} Tx minimum less {loss:.1f} dB")
        choice = choose_pad(corners, rx.rx_overload_dbm, rx.rx_min_avg_dbm, targets, steps)
        directions.append(Direction(
            from_end=frm, to_end=to, tx_pmd=tx.name, rx_pmd=rx.name, wavelength_nm=wl,
            loss_db=loss, power_budget_db=tx.tx_min_dbm - rx.rx_min_avg_dbm,
            rx_min_dbm=corners.low_dbm, rx_max_dbm=corners.high_dbm,
            margin_to_sensitivity_db=choice.margin_to_sensitivity_db,
            margin_to_overload_db=choice.margin_to_overload_db,
            pad_db=choice.pad_db, verdict=choice.verdict, reason=choice.reason))
    for spec, end in ((a, "a"), (b, "b")):
        if spec.reach_m is not None and span.length_km * 1000 > spec.reach_m:
            notes.append(f"{span.length_km:g} km is beyond {spec.name}'s reach "
                         f"({spec.reach_m / 1000:g} km) at end {end}")
    alpha_a = fibre_db_per_km(span.fibre, _wavelength(a), coefficients)
    engineered = link_attenuation_db(span.length_km, alpha_a, span.connectors,
                                     coefficients.connector_db, span.splices,
                                     coefficients.splice_db)
    return BudgetPlan(engineered, tuple(directions), tuple(dict.fromkeys(notes)))
