"""Attenuator choice and the advice texts an operator reads."""

from __future__ import annotations

import math

import pytest
from support.assessments import ER_OVERLOAD, ER_SENSITIVITY

from lightwarden.collector.readings import Quantity
from lightwarden.rules.advice import (
    LASER_CAUTION,
    STOCKED_PADS_DB,
    AdviceContext,
    advise,
    pad_advice,
    resolved_summary,
    summarize,
)
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.findings import Condition
from lightwarden.rules.trend import WearVerdict

TARGETS = MarginTargets()  # 3 dB above sensitivity, 1 dB below overload (practice)


def test_stocked_steps_are_the_usual_ones():
    # source: standards.md "Rules of thumb" (common practice)
    assert STOCKED_PADS_DB == (1.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0)


def test_pad_for_hot_receiver_on_10gbase_er():
    # source: standards.md IEEE 802.3 cl.52 10GBASE-ER, overload -1.0 / Rx min -15.8 dBm
    # (from memory); margin targets 3 dB / 1 dB (common practice).
    # Acceptable Rx: [-12.8, -2.0]; window middle -8.4. 5 -> -3.0, 7 -> -5.0, 10 -> -8.0,
    # 15 -> -13.0 (too low); -8.0 is nearest the middle.
    adv = pad_advice(2.0, ER_OVERLOAD, ER_SENSITIVITY, TARGETS)
    assert adv.pad_db == 10.0 and adv.fits
    assert adv.expected_rx_dbm == pytest.approx(-8.0)


def test_pad_on_verified_10gbase_lr_window():
    # source: standards.md IEEE 802.3 cl.52 10GBASE-LR, overload +0.5 / Rx min -14.4 dBm
    # (verified). Acceptable [-11.4, -0.5], middle -6.95: 7 dB -> -6.0 beats 10 dB -> -9.0.
    adv = pad_advice(1.0, 0.5, -14.4, TARGETS)
    assert (adv.pad_db, adv.fits) == (7.0, True)
    assert adv.expected_rx_dbm == pytest.approx(-6.0)


def test_pad_lowers_rx_by_its_value_in_db():
    # source: standards.md dB arithmetic (common practice): -2.0 dBm in, 10 dB pad,
    # -12.0 dBm out. Window 1000BASE-LX overload -3 / Rx min -19 dBm (standards.md, from
    # memory): acceptable [-16, -4], middle -11, so 10 dB (-12.0) beats 7 dB (-9.0).
    adv = pad_advice(-2.0, -3.0, -19.0, TARGETS)
    assert adv.pad_db == 10.0
    assert adv.expected_rx_dbm == pytest.approx(-12.0)


@pytest.mark.parametrize("rx", [-1.5, 0.0, 2.0, 4.5, 7.9])
def test_chosen_pad_keeps_both_targets_and_is_nearest_the_middle(rx):
    # Property over the 10GBASE-ER window (standards.md, from memory): any fitting pad
    # keeps both margin targets, and no other stocked step lands nearer the middle.
    adv = pad_advice(rx, ER_OVERLOAD, ER_SENSITIVITY, TARGETS, require_pad=True)
    assert adv.fits and adv.pad_db in STOCKED_PADS_DB
    out = rx - adv.pad_db
    assert ER_SENSITIVITY + 3.0 <= out <= ER_OVERLOAD - 1.0
    middle = (ER_OVERLOAD + ER_SENSITIVITY) / 2
    for step in STOCKED_PADS_DB:
        if ER_SENSITIVITY + 3.0 <= rx - step <= ER_OVERLOAD - 1.0:
            assert abs(out - middle) <= abs(rx - step - middle)


def test_no_pad_when_rx_keeps_its_margins_and_none_when_low():
    fine = pad_advice(-8.0, ER_OVERLOAD, ER_SENSITIVITY, TARGETS)
    assert (fine.pad_db, fine.fits) == (0.0, True)
    low = pad_advice(-14.0, ER_OVERLOAD, ER_SENSITIVITY, TARGETS)
    assert low.pad_db is None and not low.fits and "worse" in low.reason


def test_too_hot_even_for_the_largest_pad():
    adv = pad_advice(25.0, ER_OVERLOAD, ER_SENSITIVITY, TARGETS)
    assert adv.pad_db == 20.0 and not adv.fits and "20 dB" in adv.reason


def test_window_narrower_than_targets_says_so():
    adv = pad_advice(1.0, 0.0, -3.0, TARGETS)  # acceptable range [0, -1] is empty
    assert not adv.fits and "too narrow" in adv.reason
    assert adv.expected_rx_dbm < 0.0  # still clears overload


def test_unknown_sensitivity_keeps_only_the_overload_target():
    adv = pad_advice(2.0, ER_OVERLOAD, math.nan, TARGETS)
    assert adv.fits and adv.expected_rx_dbm <= ER_OVERLOAD - 1.0
    # 3 dB would give -1.0 dBm, on the overload edge; 5 dB (-3.0) is the smallest step
    # that keeps the 1 dB overload target.
    assert (adv.pad_db, adv.expected_rx_dbm) == (5.0, -3.0)


def _has_all_safety_words(text: str) -> bool:
    # source: standards.md "Laser safety": never look into a fibre end or open port,
    # infrared is invisible, inspect with a video scope, disable the transmitter or cap
    # the port before handling, follow local codes and site laser-safety procedures.
    t = text.lower()
    return all(
        w in t
        for w in (
            "never look into a fibre end or an open port",
            "invisible",
            "video scope",
            "disable the transmitter or cap the port",
            "local codes",
            "laser-safety procedures",
        )
    )


def test_caution_text_carries_every_safety_point():
    assert _has_all_safety_words(LASER_CAUTION)


@pytest.mark.parametrize(
    ("condition", "quantity", "value", "words", "handling"),
    [
        (Condition.NEAR_OVERLOAD, Quantity.RX_POWER, -1.5, ["fixed attenuator of"], True),
        (Condition.OVERLOADED, Quantity.RX_POWER, 2.0, ["10 dB at the receiver", "-8.0"], True),
        (
            Condition.NEAR_SENSITIVITY,
            Quantity.RX_POWER,
            -13.5,
            ["fibre scope", "far end", "patch cords", "tight bends", "loss budget"],
            True,
        ),
        (Condition.BELOW_SENSITIVITY, Quantity.RX_POWER, -17.0, ["clean both connectors"], True),
        (Condition.DARK, Quantity.RX_POWER, math.nan, ["far-end transmitter", "admin down"], True),
        (Condition.ALARM, Quantity.TEMPERATURE, 82.0, ["airflow", "fans"], False),
        (Condition.WARNING, Quantity.SUPPLY, 3.5, ["platform power"], False),
        (Condition.ALARM, Quantity.BIAS, 95.0, ["replacement of the optic at the near end"], True),
        (Condition.WARNING, Quantity.TX_POWER, -9.0, ["replacement of the optic"], True),
    ],
)
def test_advice_per_condition_and_caution_when_handling(
    condition, quantity, value, words, handling
):
    adv = advise(
        condition, quantity, value, low_edge=ER_SENSITIVITY, high_edge=ER_OVERLOAD, targets=TARGETS
    )
    for w in words:
        assert w in adv.text
    assert bool(adv.caution) is handling
    if handling:
        assert _has_all_safety_words(adv.caution)


def test_healthy_and_unknown_get_no_advice():
    for c in (Condition.HEALTHY, Condition.UNKNOWN):
        assert advise(c, Quantity.RX_POWER, -8.0).text == ""


def test_rx_threshold_condition_picks_its_side_from_the_value():
    hot = advise(Condition.ALARM, Quantity.RX_POWER, 0.0, low_edge=-15.8, high_edge=-1.0)
    cold = advise(Condition.ALARM, Quantity.RX_POWER, -16.5, low_edge=-15.8, high_edge=-1.0)
    assert "attenuator" in hot.text and "clean" in cold.text


def test_span_growth_and_wear_are_mentioned():
    wear = WearVerdict(True, 1.4, None, "Tx power has fallen 1.4 dB from its first readings")
    ctx = AdviceContext(span_growth_db=2.2, wear=wear, wear_end="far")
    adv = advise(Condition.NEAR_SENSITIVITY, Quantity.RX_POWER, -13.0, context=ctx)
    assert "Span loss has grown 2.2 dB since its baseline" in adv.text
    assert "schedule replacement of the optic at the far end" in adv.text
    small = advise(
        Condition.NEAR_SENSITIVITY,
        Quantity.RX_POWER,
        -13.0,
        context=AdviceContext(span_growth_db=0.4),
    )
    assert "grown" not in small.text  # within DDM noise: not worth a word


def test_summaries_read_plainly():
    s = summarize(
        Condition.NEAR_OVERLOAD, Quantity.RX_POWER, "sfp7", 1, -1.6, "overload", -1.0, "module"
    )
    assert s == "Rx power -1.6 dBm on sfp7 lane 1 is 0.6 dB below overload (-1.0 dBm, module)"
    t = summarize(
        Condition.ALARM, Quantity.TEMPERATURE, "sfp7", 0, 78.25, "high_alarm", 75.0, "module"
    )
    assert t == "Temperature 78.2 C on sfp7 is 3.2 C over high alarm (75.0 C, module)"
    d = summarize(Condition.DARK, Quantity.RX_POWER, "sfp7", 2, None, "sensitivity", -15.8, "x")
    assert d == "No light on sfp7 lane 2 while the port is admin up"
    r = resolved_summary(Quantity.RX_POWER, "sfp7", 1, -7.96, Condition.NEAR_OVERLOAD)
    assert r == "Rx power on sfp7 lane 1 back to -8.0 dBm (was near overload)"


def test_zero_bias_says_the_transmitter_is_off_before_blaming_the_laser():
    # A disabled laser draws no bias (common practice; soft TX disable is SFF-8472 A2h
    # byte 110 b6, standards.md verified): configuration is the first suspect, then the optic.
    a = advise(Condition.ALARM, Quantity.BIAS, 0.0, low_edge=2.0, high_edge=60.0)
    assert a.text.startswith("Laser bias is 0 mA: the transmitter is off")
    assert "disabled on purpose" in a.text
    assert a.caution == LASER_CAUTION
    worn = advise(Condition.ALARM, Quantity.BIAS, 1.5, low_edge=2.0, high_edge=60.0)
    assert "outside the module's thresholds" in worn.text
