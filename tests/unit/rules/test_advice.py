"""Attenuator choice and the advice texts an operator reads."""

from __future__ import annotations

import math

import pytest
from support.assessments import ER_OVERLOAD, ER_SENSITIVITY

from lightwarden.collector.readings import Quantity
from lightwarden.rules.advice import (
    LASER_CAUTION,
    AdviceContext,
    advise,
    resolved_summary,
    summarize,
)
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.findings import Condition
from lightwarden.rules.trend import WearVerdict

TARGETS = MarginTargets()  # 3 dB above sensitivity, 1 dB below overload (practice)


def test_hot_er_receiver_is_padded_for_the_worst_case_not_the_middle():
    # source: standards.md IEEE 802.3 cl.52 10GBASE-ER, Tx -4.7..+4.0, overload -1.0, Rx
    # min -15.8 dBm (from memory); margin targets 3 dB / 1 dB (common practice), 0.5 dB
    # hysteresis (ours). Rx +2.0 dBm on a 1.5 dB span: the far end may launch -4.7 dBm,
    # so the low corner is -6.2 dBm; 5 dB keeps both (-3.0 and -11.2), 10 dB (the old
    # mid-window choice) would leave -16.2 dBm, below sensitivity.
    ctx = AdviceContext(far_device="qm-core-b", far_port="sfp31", far_tx_min_dbm=-4.7,
                        far_tx_max_dbm=4.0, far_window_from="standard", span_loss_db=1.5,
                        span_loss_from="measured")
    adv = advise(Condition.OVERLOADED, Quantity.RX_POWER, 2.0, low_edge=ER_SENSITIVITY,
                 high_edge=ER_OVERLOAD, context=ctx)
    assert "fixed attenuator of 5 dB" in adv.text and "-11.2 dBm" in adv.text
    assert adv.caution == LASER_CAUTION


def test_unknown_far_end_says_what_was_assumed():
    ctx = AdviceContext(own_tx_min_dbm=-4.7, own_tx_max_dbm=4.0)
    adv = advise(Condition.OVERLOADED, Quantity.RX_POWER, 2.0, low_edge=ER_SENSITIVITY,
                 high_edge=ER_OVERLOAD, context=ctx)
    assert "assumed: the far end is of the same PMD" in adv.text
    # 2.0 - 8.7 = -6.7 dBm low corner: 5 dB keeps -11.7 >= -12.8
    assert "fixed attenuator of 5 dB" in adv.text


def test_a_launch_two_compliant_optics_cannot_make_is_questioned_not_padded():
    # 10GBASE-LR Tx max +0.5 dBm = overload +0.5 dBm (IEEE 802.3 cl.52, standards.md,
    # verified): Rx +1.0 dBm over an engineered 1.2 dB (0.5 km) implies +2.2 dBm.
    ctx = AdviceContext(far_tx_min_dbm=-8.2, far_tx_max_dbm=0.5, span_loss_db=1.2,
                        span_loss_from="engineered")
    adv = advise(Condition.OVERLOADED, Quantity.RX_POWER, 1.0, low_edge=-14.4, high_edge=0.5,
                 context=ctx)
    assert "above its window maximum" in adv.text and "attenuator of" not in adv.text
    assert adv.caution == LASER_CAUTION


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
        (Condition.OVERLOADED, Quantity.RX_POWER, 2.0, ["5 dB at the receiver", "-3.0"], True),
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
