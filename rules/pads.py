"""Worst-case pad advice: the one rule for live links and for links still on paper.

A receiver sees anything between two corners: the **high corner** (the most light it
can get) and the **low corner** (the least). A fixed attenuator of N dB lowers both by
N dB (standards.md "dB arithmetic", common practice). The advised pad is the smallest
stocked step that keeps both targets at once:

    high - pad <= overload - overload target - hysteresis
    low  - pad >= sensitivity + sensitivity target

The hysteresis is the rule layer's power hysteresis (0.5 dB by default): a pad that only
just meets the overload target would leave a receiver that wobbles into near_overload.

Live link: the high corner is Rx now, the low corner is the far end's Tx window minimum
minus the span loss (the far end's polled Tx minus Rx where it is polled, else the
engineered loss). Planning: the corners are the far Tx window's maximum and minimum minus
the engineered loss. The first is a measurement, the second a promise; both meet here.

Verdicts, in precedence: ``fails`` (the worst case is below sensitivity, or no stocked
pad clears overload while keeping light) > ``short`` (closes, but misses the sensitivity
target) > ``pad`` (closes with the advised pad) > ``ok``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from enum import StrEnum

#: Fixed attenuator values commonly stocked (standards.md "Rules of thumb", practice).
STOCKED_PADS_DB: tuple[float, ...] = (1.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0)

#: How far a live reading may imply a launch outside the far optic's window before the
#: reading, not the plant, is the suspect (1 dB: about the DDM accuracy budget of one end,
#: SFF-8472 +-3 dB being the worst case; our choice).
IMPLIED_LAUNCH_SLACK_DB = 1.0


class Verdict(StrEnum):
    OK = "ok"
    PAD = "pad"
    SHORT = "short"
    FAILS = "fails"


@dataclass(slots=True, frozen=True)
class PadTargets:
    """Margins the result must keep (dB): the site's margin targets and power hysteresis."""

    sensitivity_db: float = 3.0
    overload_db: float = 1.0
    hysteresis_db: float = 0.5

    def __post_init__(self) -> None:
        for name in ("sensitivity_db", "overload_db", "hysteresis_db"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0.0):
                raise ValueError(f"pad targets: {name} must be a number >= 0, got {value!r}")


@dataclass(slots=True, frozen=True)
class Corners:
    """The most and the least light a receiver may see (dBm), each with where it came from."""

    high_dbm: float
    low_dbm: float
    high_from: str = ""
    low_from: str = ""


@dataclass(slots=True, frozen=True)
class PadChoice:
    verdict: Verdict
    pad_db: float | None  # the advised stocked pad; None when none is needed or none helps
    rx_low_dbm: float  # the corners after the pad (before it when pad_db is None)
    rx_high_dbm: float
    margin_to_sensitivity_db: float  # at the low corner, after the pad
    margin_to_overload_db: float  # at the high corner, after the pad
    reason: str


def _clean_steps(steps: Sequence[float]) -> list[float]:
    out = sorted({float(s) for s in steps if math.isfinite(s) and s > 0})
    if not out:
        raise ValueError("pad advice: no stocked attenuator steps given")
    return out


def choose_pad(
    corners: Corners,
    overload_dbm: float,
    sensitivity_dbm: float,
    targets: PadTargets | None = None,
    steps: Sequence[float] = STOCKED_PADS_DB,
) -> PadChoice:
    """The smallest stocked pad that keeps both targets at both corners (module doc).

    ``overload_dbm`` may be NaN (unknown: only the low side is judged); the sensitivity
    must be known, since a pad is judged by the light it leaves.
    """
    targets = targets or PadTargets()
    stock = _clean_steps(steps)
    high, low = corners.high_dbm, corners.low_dbm
    if not (math.isfinite(high) and math.isfinite(low)) or low > high:
        raise ValueError(f"pad advice: corners must be finite with low <= high, got "
                         f"{low!r}..{high!r}")
    if not math.isfinite(sensitivity_dbm):
        raise ValueError("pad advice: the receiver's sensitivity is not known")
    ceiling = (overload_dbm - targets.overload_db - targets.hysteresis_db
               if math.isfinite(overload_dbm) else math.inf)
    floor = sensitivity_dbm + targets.sensitivity_db

    def result(verdict: Verdict, pad: float | None, reason: str) -> PadChoice:
        p = pad or 0.0
        return PadChoice(verdict, pad, low - p, high - p, low - p - sensitivity_dbm,
                         overload_dbm - (high - p) if math.isfinite(overload_dbm) else math.nan,
                         reason)

    if high <= ceiling:
        if low >= floor:
            return result(Verdict.OK, None, "both corners keep their margins: no pad needed")
        if low >= sensitivity_dbm:
            return result(Verdict.SHORT, None, (
                f"the low corner ({low:.1f} dBm, {corners.low_from or 'worst case'}) is "
                f"{low - sensitivity_dbm:.1f} dB above sensitivity, short of the "
                f"{targets.sensitivity_db:.1f} dB target; a pad would make it worse"))
        return result(Verdict.FAILS, None, (
            f"the low corner ({low:.1f} dBm, {corners.low_from or 'worst case'}) is below "
            f"sensitivity ({sensitivity_dbm:.1f} dBm): the link may not close"))
    need = high - ceiling  # at least this much attenuation
    room = low - floor  # at most this much keeps the sensitivity target
    fitting = [s for s in stock if need <= s <= room]
    if fitting:
        pad = fitting[0]
        return result(Verdict.PAD, pad, (
            f"a {pad:g} dB pad at the receiver brings the high corner to {high - pad:.1f} dBm "
            f"and keeps the low corner at {low - pad:.1f} dBm"))
    clearing = [s for s in stock if s >= need]
    if clearing and low - clearing[0] >= sensitivity_dbm:
        pad = clearing[0]
        return result(Verdict.SHORT, pad, (
            f"no stocked pad keeps both targets: {pad:g} dB clears overload but leaves the low "
            f"corner {low - pad - sensitivity_dbm:.1f} dB above sensitivity; "
            + _what_would(need, room, high, low, targets)))
    return result(Verdict.FAILS, None, (
        "no stocked pad both clears overload and keeps light at the low corner; "
        + _what_would(need, room, high, low, targets)))


def _what_would(need: float, room: float, high: float, low: float,
                targets: PadTargets) -> str:
    spread = high - low
    window = need - room  # how much the corners' spread exceeds the usable window
    if need <= room:
        return (f"a variable attenuator set between {need:.1f} and {room:.1f} dB would "
                "(or a pad of that value if one can be had)")
    return (f"the corners span {spread:.1f} dB, {window:.1f} dB more than the receiver's "
            f"window leaves after its margins: a shorter-reach optic (a lower launch) fits "
            "better than any pad")


def implied_launch_check(rx_dbm: float, loss_db: float, tx_min_dbm: float | None,
                         tx_max_dbm: float | None) -> str:
    """Question a reading whose implied far-end launch (Rx + engineered loss) lies more
    than ``IMPLIED_LAUNCH_SLACK_DB`` outside the far optic's Tx window; "" when it fits.

    Two compliant optics cannot do what such a reading says (e.g. Rx +1.0 dBm on a 0.5 km
    10GBASE-LR span implies a launch above the +0.5 dBm maximum), so the far-end optic, the
    plant record or the reading's calibration is wrong before any pad is right.
    """
    if not (math.isfinite(rx_dbm) and math.isfinite(loss_db)):
        return ""
    launch = rx_dbm + loss_db
    if tx_max_dbm is not None and launch > tx_max_dbm + IMPLIED_LAUNCH_SLACK_DB:
        return (f"Rx {rx_dbm:+.1f} dBm over an engineered {loss_db:.1f} dB implies a far-end "
                f"launch of {launch:+.1f} dBm, above its window maximum {tx_max_dbm:+.1f} dBm: "
                "check the far-end optic (a longer-reach part?), the plant record and the "
                "reading's calibration before fitting a pad")
    if tx_min_dbm is not None and launch < tx_min_dbm - IMPLIED_LAUNCH_SLACK_DB:
        return (f"Rx {rx_dbm:+.1f} dBm over an engineered {loss_db:.1f} dB implies a far-end "
                f"launch of {launch:+.1f} dBm, below its window minimum {tx_min_dbm:+.1f} dBm: "
                "the span loses more than recorded, or the far-end optic is weak")
    return ""
