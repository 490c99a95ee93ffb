"""The words an operator acts on: what is wrong with a reading, and what to do about it.

Texts are short and plain: they go into alert annotations, CLI output and status pages.
Any advice that means handling fibre or optics comes with ``LASER_CAUTION``
(standards.md "Laser safety").
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from lightwarden.collector.readings import Quantity
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.findings import Condition, Edge
from lightwarden.rules.pads import (
    STOCKED_PADS_DB,
    Corners,
    PadTargets,
    Verdict,
    choose_pad,
    implied_launch_check,
)
from lightwarden.rules.trend import WearVerdict

LASER_CAUTION = (
    "Laser safety: never look into a fibre end or an open port, even when the link is down; "
    "infrared light is invisible. Inspect with a video scope. Disable the transmitter or cap "
    "the port before handling. Follow local codes and the site's laser-safety procedures."
)

#: The same margin targets the conditions are judged with, so a pad chosen here never
#: lands a receiver back in NEAR_OVERLOAD / NEAR_SENSITIVITY.
DEFAULT_TARGETS = MarginTargets()


@dataclass(slots=True, frozen=True)
class AdviceContext:
    """Facts from outside one reading that change the advice (history, plant)."""

    span_growth_db: float | None = None  # span loss now minus its baseline
    wear: WearVerdict | None = None  # the transmitter feeding this reading
    wear_end: str = "far"  # "near" or "far": where that transmitter sits
    rate_per_day: float | None = None
    #: The far end from the plant record, and what its transmitter reads (Rx rows)
    far_device: str = ""
    far_port: str = ""
    far_tx_dbm: float | None = None
    far_tx_condition: Condition | None = None  # the far Tx row's condition when polled
    #: For pad advice: the far transmitter's window (its module's levels or its PMD row)
    #: and the span's loss in this direction, measured (far Tx - this Rx) or engineered
    far_tx_min_dbm: float | None = None
    far_tx_max_dbm: float | None = None
    far_window_from: str = ""  # "module", "standard", ...
    span_loss_db: float | None = None
    span_loss_from: str = ""  # "measured" or "engineered"
    #: This optic's own PMD Tx window, the assumption when the far end is not known
    own_tx_min_dbm: float | None = None
    own_tx_max_dbm: float | None = None
    pad_steps: tuple[float, ...] = ()  # the site's stocked pads; () means the default stock
    hysteresis_db: float = 0.5


#: How much span loss growth is worth mentioning (dB); same modules, so offsets cancel.
SPAN_GROWTH_NOTE_DB = 1.0


@dataclass(slots=True, frozen=True)
class Advice:
    text: str
    caution: str  # LASER_CAUTION when the advice means handling fibre or optics, else ""
    pad_db: float | None = None  # the fixed attenuator advised, when the advice is a pad


_CLEAN = (
    "Inspect and clean both connectors with a fibre scope, starting at the far end; "
    "check patch cords and look for tight bends; compare span loss with the loss budget."
)
_DARK = "Check the far-end transmitter, the patching, and whether the far-end port is admin down."
_TX_DARK = (
    "This end's transmitter gives no light (no bias reading to tell why): check the port's "
    "configuration (shut down, transmitter disabled) and the module; reseat it, and if the "
    "light does not come back, schedule replacement of the optic at this end."
)
_TX_FAULT = (
    "The transmitter at this end has failed (the module flags TX_FAULT, or its laser is "
    "driven and gives no light). Schedule replacement of the optic at this end."
)
_LOS = (
    "The module flags loss of signal on this receiver: check the far-end transmitter, the "
    "patching and the connectors along the path."
)
_NOT_READY = (
    "The module is not in its ready state: check the port configuration and the module's "
    "seating; reseat it, and replace it if it stays out of the ready state."
)
_LATCHED = (
    "The module latched this flag since it was last read, though the reading is back inside "
    "its levels: a transient excursion. Look at the history around it and watch for a repeat."
)
_OFF_STANDARD = (
    "Tx power is outside the standard's launch window for this PMD, though inside the "
    "module's own levels: a compliant far receiver is no longer promised its budget. Check "
    "that the part suits the PMD on record; if the launch keeps falling, plan replacement of "
    "the optic at this end."
)
_LASER_OFF = (
    "Laser bias is 0 mA: the transmitter is off. Check whether the port or the module's "
    "transmitter was disabled on purpose; if not, schedule replacement of the optic at the "
    "near end."
)
_AIRFLOW = "Check airflow and fans: blocked vents, failed fans, hot aisle temperature."
_POWER = "Check the platform power: supplies and voltage rails of the device."


def _fmt(x: float) -> str:
    return f"{x:+.1f}" if x != 0 else "0.0"


def _wear_sentence(ctx: AdviceContext | None) -> str:
    if ctx is None or ctx.wear is None or not ctx.wear.worn:
        return ""
    end = "far" if ctx.wear_end != "near" else "near"
    return f" The {end}-end {ctx.wear.reason}: schedule replacement of the optic at the {end} end."


def _far_dark(ctx: AdviceContext | None) -> str:
    """Dark receiver: name the far end and what its transmitter says, when known."""
    if ctx is None or not ctx.far_device:
        return _DARK
    far = f"{ctx.far_device} {ctx.far_port}"
    tx = ctx.far_tx_condition
    if tx in (Condition.LASER_OFF, Condition.TX_FAULT) or (
            tx is Condition.DARK and ctx.far_tx_dbm is None):
        why = {Condition.LASER_OFF: "its laser is off",
               Condition.TX_FAULT: "its transmitter has failed"}.get(tx, "it sends no light")
        return (f"The far end, {far}, is the cause: {why}. Act on that port's alert; this "
                "receiver will see light again when it does.")
    if ctx.far_tx_dbm is not None and math.isfinite(ctx.far_tx_dbm):
        return (f"The far end, {far}, transmits {_fmt(ctx.far_tx_dbm)} dBm, so the light is "
                "lost on the way: check the patching and the fibre between the two ends "
                "(a break, a wrong or missing patch cord).")
    return (f"Check the far-end transmitter on {far}, the patching, and whether that port is "
            "admin down.")


def advise(
    condition: Condition,
    quantity: Quantity,
    value: float,
    *,
    low_edge: float = math.nan,
    high_edge: float = math.nan,
    context: AdviceContext | None = None,
    targets: MarginTargets = DEFAULT_TARGETS,
) -> Advice:
    """Concrete advice for one reading's condition. Empty text when there is nothing to do.

    For Rx power ``low_edge`` is the sensitivity and ``high_edge`` the overload (as in
    ``Assessment``); for other quantities they are the alarm thresholds.
    """
    condition = Condition(condition)
    if condition in (Condition.HEALTHY, Condition.UNKNOWN):
        return Advice("", "")
    if condition is Condition.LASER_OFF:
        return Advice(_LASER_OFF, LASER_CAUTION)
    if condition is Condition.TX_FAULT:
        return Advice(_TX_FAULT, LASER_CAUTION)
    if condition is Condition.LOSS_OF_SIGNAL:
        return Advice(_LOS, LASER_CAUTION)
    if condition is Condition.NOT_READY:
        return Advice(_NOT_READY, LASER_CAUTION)
    if condition in (Condition.LATCHED_ALARM, Condition.LATCHED_WARNING):
        return Advice(_LATCHED, "")
    if condition is Condition.OFF_STANDARD:
        return Advice(_OFF_STANDARD, LASER_CAUTION)
    if condition is Condition.DARK:
        if quantity is Quantity.TX_POWER:
            return Advice(_TX_DARK, LASER_CAUTION)
        return Advice(_far_dark(context) + _wear_sentence(context), LASER_CAUTION)
    if quantity is Quantity.RX_POWER:
        return _rx_advice(condition, value, low_edge, high_edge, context, targets)
    if quantity is Quantity.TEMPERATURE:
        return Advice(_AIRFLOW, "")
    if quantity is Quantity.SUPPLY:
        return Advice(_POWER, "")
    # Tx power or bias outside the module's thresholds: the transmitter here is the suspect.
    if quantity is Quantity.BIAS and value == 0.0:
        # No bias at all means the laser is switched off, which is as often configuration
        # (a disabled port, TX_DISABLE asserted) as failure: say both, in that order.
        return Advice(_LASER_OFF, LASER_CAUTION)
    what = "Tx power" if quantity is Quantity.TX_POWER else "laser bias"
    wear = context.wear if context is not None and context.wear is not None else None
    why = f" ({wear.reason})" if wear is not None and wear.worn else ""
    return Advice(
        f"{what} is outside the module's thresholds{why}: "
        "schedule replacement of the optic at the near end.",
        LASER_CAUTION,
    )


def rx_high_side(condition: Condition, value: float, low_edge: float, high_edge: float) -> bool:
    """Is an Rx condition about the overload side (True) or the sensitivity side?

    Threshold conditions (WARNING/ALARM) on Rx carry no side of their own: take the half
    of the window the value sits in; with only one edge known, that edge's side.
    """
    if condition in (Condition.NEAR_OVERLOAD, Condition.OVERLOADED):
        return True
    if condition not in (Condition.WARNING, Condition.ALARM) or not math.isfinite(value):
        return False
    if math.isfinite(low_edge) and math.isfinite(high_edge):
        return value >= (low_edge + high_edge) / 2.0
    return math.isfinite(high_edge)


def rx_corners(value: float, ctx: AdviceContext | None) -> Corners:
    """The corners a hot receiver's pad must keep (rules/pads.py): Rx now, and the least
    light it could get, from what is known of the far end, saying what was assumed."""
    if ctx is not None and ctx.far_tx_min_dbm is not None and ctx.span_loss_db is not None:
        low = min(value, ctx.far_tx_min_dbm - ctx.span_loss_db)
        return Corners(value, low, "Rx now", (
            f"the far end's Tx minimum {_fmt(ctx.far_tx_min_dbm)} dBm "
            f"({ctx.far_window_from or 'its window'}) less the {ctx.span_loss_from or ''} "
            f"span loss {ctx.span_loss_db:.1f} dB").replace("  ", " "))
    if ctx is not None and ctx.own_tx_min_dbm is not None and ctx.own_tx_max_dbm is not None:
        # Unknown far end: assume it is this PMD and launches at its maximum now, so it
        # could fall by the whole width of the launch window.
        width = ctx.own_tx_max_dbm - ctx.own_tx_min_dbm
        return Corners(value, value - width, "Rx now", (
            f"assumed: the far end is of the same PMD and launches at its maximum now, so "
            f"it may fall {width:.1f} dB"))
    return Corners(value, value, "Rx now", "assumed: the far end's launch stays as it is")


def _pad_text(value: float, low_edge: float, high_edge: float, ctx: AdviceContext | None,
              targets: MarginTargets) -> tuple[str, float | None]:
    if not (math.isfinite(value) and math.isfinite(high_edge) and math.isfinite(low_edge)):
        return "Rx is too high: add a fixed attenuator at the receiver.", None
    question = ""
    if ctx is not None and ctx.span_loss_from == "engineered" and ctx.span_loss_db is not None:
        question = implied_launch_check(value, ctx.span_loss_db, ctx.far_tx_min_dbm,
                                        ctx.far_tx_max_dbm)
    if question:
        return question[0].upper() + question[1:] + ".", None
    corners = rx_corners(value, ctx)
    pad_targets = PadTargets(targets.sensitivity_db, targets.overload_db,
                             ctx.hysteresis_db if ctx is not None else 0.5)
    steps = ctx.pad_steps if ctx is not None and ctx.pad_steps else STOCKED_PADS_DB
    choice = choose_pad(corners, high_edge, low_edge, pad_targets, steps)
    if choice.pad_db is None:
        if choice.verdict is Verdict.OK:
            return "Rx keeps its margins at both corners: no pad needed.", None
        return f"No stocked pad fits: {choice.reason}.", None
    text = (f"Add a fixed attenuator of {choice.pad_db:g} dB at the receiver (Rx now "
            f"{_fmt(value)} dBm becomes {_fmt(choice.rx_high_dbm)} dBm; the least light, "
            f"{corners.low_from}, becomes {_fmt(choice.rx_low_dbm)} dBm).")
    if choice.verdict is not Verdict.PAD:
        text += f" Note: {choice.reason}."
    return text, choice.pad_db


def _rx_advice(
    condition: Condition,
    value: float,
    low_edge: float,
    high_edge: float,
    context: AdviceContext | None,
    targets: MarginTargets,
) -> Advice:
    if rx_high_side(condition, value, low_edge, high_edge):
        text, pad = _pad_text(value, low_edge, high_edge, context, targets)
        return Advice(text, LASER_CAUTION, pad)
    text = _CLEAN
    growth = None if context is None else context.span_growth_db
    if growth is not None and growth >= SPAN_GROWTH_NOTE_DB:
        text += f" Span loss has grown {growth:.1f} dB since its baseline."
    text += _wear_sentence(context)
    return Advice(text, LASER_CAUTION)


# --- summaries -----------------------------------------------------------------------

_QUANTITY_WORDS = {
    Quantity.RX_POWER: "Rx power",
    Quantity.TX_POWER: "Tx power",
    Quantity.BIAS: "Laser bias",
    Quantity.TEMPERATURE: "Temperature",
    Quantity.SUPPLY: "Supply voltage",
}

_EDGE_WORDS = {
    "overload": "overload",
    "sensitivity": "sensitivity",
    "launch_min": "launch minimum",
    "launch_max": "launch maximum",
    "high_alarm": "high alarm",
    "low_alarm": "low alarm",
    "high_warning": "high warning",
    "low_warning": "low warning",
}


_HIGH_EDGES = frozenset(e.word for e in Edge if e.high)


def _num(x: float, unit: str) -> str:
    if unit == "V":
        return f"{x:.2f} V"
    if unit == "dBm":
        return f"{_fmt(x)} dBm"
    return f"{x:.1f} {unit}"


def _where(port: str, lane: int) -> str:
    return f"{port} lane {lane}" if lane > 0 else port


def resolved_summary(
    quantity: Quantity,
    port: str,
    lane: int,
    value: float | None,
    was: Condition,
    *,
    gone_from: str | None = None,
) -> str:
    """One line for a resolved alert; ``gone_from`` names the device when the row vanished."""
    where = _where(port, lane)
    was_words = Condition(was).word.replace("_", " ")
    if gone_from is not None:
        return f"{where}: no longer reported by {gone_from} (was {was_words})"
    if value is None or not math.isfinite(value):
        return f"{where}: {was_words} has cleared"
    name = _QUANTITY_WORDS[quantity]
    return f"{name} on {where} back to {_num(value, quantity.unit)} (was {was_words})"


def summarize(
    condition: Condition,
    quantity: Quantity,
    port: str,
    lane: int,
    value: float | None,
    edge_name: str,
    edge_value: float | None,
    window_source: str,
) -> str:
    """One line saying what is wrong, e.g. "Rx power -2.0 dBm on sfp1 lane 1 is 1.0 dB
    below overload (-1.0 dBm, standard)"."""
    condition = Condition(condition)
    where = _where(port, lane)
    if condition is Condition.DARK:
        if quantity is Quantity.TX_POWER:
            return f"No light from the transmitter on {where} while the port is admin up"
        return f"No light on {where} while the port is admin up"
    if condition is Condition.LASER_OFF:
        return f"The laser on {where} is off: no Tx light and no bias"
    if condition is Condition.TX_FAULT and (value is None or not math.isfinite(value)):
        return f"The transmitter on {where} has failed: driven, but no light"
    unit = quantity.unit
    name = _QUANTITY_WORDS[quantity]
    if value is None or not math.isfinite(value):
        return f"{name} on {where}: {condition.word.replace('_', ' ')}"
    head = f"{name} {_num(value, unit)} on {where}"
    if not edge_name or edge_value is None or not math.isfinite(edge_value):
        return f"{head}: {condition.word.replace('_', ' ')}"
    edge = f"{_EDGE_WORDS.get(edge_name, edge_name)} ({_num(edge_value, unit)}, {window_source})"
    gap = abs(value - edge_value)
    gap_text = f"{gap:.1f} dB" if unit == "dBm" else _num(gap, unit)
    if condition is Condition.NEAR_OVERLOAD:
        return f"{head} is {gap_text} below {edge}"
    if condition is Condition.NEAR_SENSITIVITY:
        return f"{head} is {gap_text} above {edge}"
    if condition is Condition.OVERLOADED or edge_name in _HIGH_EDGES:
        return f"{head} is {gap_text} over {edge}"
    return f"{head} is {gap_text} under {edge}"
