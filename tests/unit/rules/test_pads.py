"""Worst-case pad advice.

Sources: 10GBASE-ER window (IEEE 802.3 cl.52 via standards.md, from memory): Tx -4.7..+4.0
dBm, Rx overload -1.0 dBm, sensitivity -15.8 dBm. A pad of N dB lowers Rx by N dB
(standards.md "dB arithmetic", common practice). Stocked steps 1, 3, 5, 7, 10, 15, 20 dB
and margin targets 3 dB / 1 dB with 0.5 dB hysteresis (standards.md "Rules of thumb",
common practice; the hysteresis is ours, rules/hysteresis.py).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lightwarden.rules.pads import (
    STOCKED_PADS_DB,
    Corners,
    PadTargets,
    Verdict,
    choose_pad,
    implied_launch_check,
)

ER_TX = (-4.7, 4.0)
ER_OVERLOAD, ER_SENS = -1.0, -15.8


def test_hot_er_receiver_gets_the_smallest_pad_that_keeps_the_far_ends_minimum():
    # 1.5 dB span reading +2.0 dBm: the far end may later launch at its -4.7 dBm minimum,
    # leaving -6.2 dBm before the pad. Needs >= 4.5 dB (2.0 - 5 = -3.0 <= -2.5), keeps
    # <= 6.6 dB (-6.2 - 6.6 = -12.8): 5 dB. A 10 dB pad would leave -16.2 dBm, below
    # the -15.8 dBm sensitivity.
    c = choose_pad(Corners(2.0, ER_TX[0] - 1.5), ER_OVERLOAD, ER_SENS)
    assert (c.verdict, c.pad_db) == (Verdict.PAD, 5.0)
    assert c.rx_high_dbm == pytest.approx(-3.0) and c.rx_low_dbm == pytest.approx(-11.2)
    ten = ER_TX[0] - 1.5 - 10.0
    assert ten < ER_SENS  # the old mid-window advice would have failed the low corner


def test_no_pad_needed_and_short_and_fails():
    assert choose_pad(Corners(-5.0, -10.0), ER_OVERLOAD, ER_SENS).verdict is Verdict.OK
    short = choose_pad(Corners(-5.0, -14.0), ER_OVERLOAD, ER_SENS)
    assert (short.verdict, short.pad_db) == (Verdict.SHORT, None)
    assert "a pad would make it worse" in short.reason
    fails = choose_pad(Corners(-5.0, -17.0), ER_OVERLOAD, ER_SENS)
    assert fails.verdict is Verdict.FAILS


def test_window_too_narrow_for_the_corners_says_what_would_work():
    # corners 15 dB apart against a usable window of -2.5..-12.8 (10.3 dB): no pad can
    c = choose_pad(Corners(3.0, -12.0), ER_OVERLOAD, ER_SENS)
    assert c.verdict is Verdict.FAILS and "shorter-reach optic" in c.reason
    # a gap the stock misses: need 2.0..2.6 dB, stock has 1 and 3
    c = choose_pad(Corners(-0.5, -10.2), ER_OVERLOAD, ER_SENS)
    assert c.verdict is Verdict.SHORT and c.pad_db == 3.0
    assert "variable attenuator set between 2.0 and 2.6 dB" in c.reason


def test_implied_launch_above_two_compliant_optics_is_questioned():
    # 10GBASE-LR Tx max +0.5 dBm (IEEE 802.3 cl.52, standards.md, verified); 0.5 km at
    # 0.4 dB/km + 2 connectors at 0.5 dB (planning values, practice) = 1.2 dB
    text = implied_launch_check(1.0, 1.2, -8.2, 0.5)
    assert "above its window maximum" in text and "+2.2 dBm" in text
    assert implied_launch_check(-3.0, 1.2, -8.2, 0.5) == ""


def _brute(high, low, overload, sens, t: PadTargets, stock):
    ok = [s for s in sorted(stock)
          if high - s <= overload - t.overload_db - t.hysteresis_db
          and low - s >= sens + t.sensitivity_db]
    return ok[0] if ok else None


@settings(max_examples=400, deadline=None)
@given(st.floats(-30, 10), st.floats(0, 20), st.floats(-3, 5), st.floats(6, 25),
       st.lists(st.sampled_from([0.5, 1, 2, 3, 5, 7, 10, 15, 20]), min_size=1, max_size=7))
def test_advised_pad_equals_a_brute_force_search(high, spread, overload, window, stock):
    low = high - spread
    sens = overload - window
    t = PadTargets()
    c = choose_pad(Corners(high, low), overload, sens, t, stock)
    need_pad = high > overload - t.overload_db - t.hysteresis_db
    expected = _brute(high, low, overload, sens, t, stock)
    if not need_pad:
        assert c.pad_db is None
    elif expected is not None:
        assert (c.verdict, c.pad_db) == (Verdict.PAD, expected)
    else:
        assert c.verdict in (Verdict.SHORT, Verdict.FAILS)
    if c.pad_db is not None:
        assert c.pad_db in stock
        assert c.rx_high_dbm == pytest.approx(high - c.pad_db)
    assert math.isfinite(c.margin_to_sensitivity_db)


def test_default_stock_is_the_common_one():
    assert STOCKED_PADS_DB == (1.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0)
