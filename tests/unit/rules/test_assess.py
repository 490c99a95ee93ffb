"""Margins and instant conditions for whole batches.

Edges: standards.md "IEEE 802.3 optical PMD windows", 10GBASE-LR overload +0.5 dBm and
minimum average receive power -14.4 dBm (verified). Margin targets 3 dB / 1 dB: standards.md
"Rules of thumb" (common practice). dB arithmetic of a pad: standards.md "Units and
conversions" (practice). mW to dBm: textbook definition (standards.md).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lightwarden.collector.readings import (
    BatchBuilder,
    OpticIdentity,
    Quantity,
    ReadingStatus,
    Thresholds,
)
from lightwarden.rules.assess import ADMIN_DOWN_NOTE, NO_WINDOW_NOTE, MarginTargets, assess
from lightwarden.rules.catalogue import default_catalogue
from lightwarden.rules.findings import Condition, WindowSource
from lightwarden.rules.hysteresis import ConditionTracker, HysteresisPolicy
from lightwarden.rules.windows import OMA_NOTE, WindowOverride, WindowResolver

RX, TX = Quantity.RX_POWER, Quantity.TX_POWER
C = Condition


def lr_optic(port="eth1/1", **kw) -> OpticIdentity:
    base = dict(device="harrow-core-1", port=port, pmd="10GBASE-LR", part_number="HGL-10L-31",
                serial="HG" + port, admin_up=True)
    base.update(kw)
    return OpticIdentity(**base)


def rx_batch(values, optic_kw=None, taken_at=1_000.0):
    """One 10GBASE-LR optic per value, Rx power rows only; None means no light."""
    b = BatchBuilder("harrow-core-1")
    for i, v in enumerate(values):
        o = b.add_optic(lr_optic(port=f"eth1/{i + 1}", **(optic_kw or {})))
        if v is None:
            b.add_power_mw(o, 1, RX, 0.0)
        else:
            b.add(o, 1, RX, v)
    return b.build(taken_at)


def test_10gbase_lr_margins_at_minus_5_dbm():
    # source: standards.md 10GBASE-LR (IEEE 802.3 cl.52, verified): overload +0.5, min -14.4
    # -> 0.5 - (-5.0) = 5.5 dB to overload, -5.0 - (-14.4) = 9.4 dB to sensitivity
    a = assess(rx_batch([-5.0]))
    assert a.margin_high_db[0] == pytest.approx(5.5)
    assert a.margin_low_db[0] == pytest.approx(9.4)
    assert (a.low_edge[0], a.high_edge[0]) == (-14.4, 0.5)
    assert a.window_source[0] == WindowSource.PMD_TABLE
    assert a.instant[0] == C.HEALTHY and a.condition[0] == C.HEALTHY


def test_reading_from_milliwatts():
    # source: SFF-8472 worked decode in standards.md: 800.0 uW = -0.969 dBm (verified);
    # against 10GBASE-LR overload +0.5 (verified) that is 1.469 dB of margin
    b = BatchBuilder("harrow-core-1")
    o = b.add_optic(lr_optic())
    b.add_power_mw(o, 1, RX, 0.8)
    a = assess(b.build(0.0))
    assert a.margin_high_db[0] == pytest.approx(1.469, abs=5e-4)
    assert a.instant[0] == C.HEALTHY  # 1.469 dB >= 1 dB overload target


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        pytest.param(0.5, C.OVERLOADED, id="at-overload-+0.5"),
        pytest.param(3.0, C.OVERLOADED, id="over-overload"),
        pytest.param(-0.25, C.NEAR_OVERLOAD, id="0.75dB-below-overload"),
        pytest.param(-0.75, C.HEALTHY, id="1.25dB-below-overload"),
        pytest.param(-11.0, C.HEALTHY, id="3.4dB-above-sensitivity"),
        pytest.param(-11.6, C.NEAR_SENSITIVITY, id="2.8dB-above-sensitivity"),
        pytest.param(-14.4, C.BELOW_SENSITIVITY, id="at-sensitivity--14.4"),
        pytest.param(-25.0, C.BELOW_SENSITIVITY, id="far-below"),
        pytest.param(None, C.DARK, id="no-light-admin-up"),
    ],
)
def test_rx_instant_conditions_10gbase_lr(value, expected):
    # source: standards.md 10GBASE-LR window (verified) and 3 dB / 1 dB targets (practice)
    assert assess(rx_batch([value])).instant[0] == expected


def test_custom_margin_targets():
    a = assess(rx_batch([-11.0]), targets=MarginTargets(sensitivity_db=4.0, overload_db=2.0))
    assert a.instant[0] == C.NEAR_SENSITIVITY
    with pytest.raises(ValueError, match="sensitivity_db"):
        MarginTargets(sensitivity_db=-1.0)


def test_narrow_window_reports_the_nearer_edge():
    # A site window 3 dB wide: both targets are missed; the nearer edge is named.
    o = WindowOverride(quantity=RX, part_number="HGL-10L-31", rx_sensitivity=-6.0,
                       rx_overload=-3.0)
    a = assess(rx_batch([-3.6, -5.5]), overrides=[o])
    assert list(a.instant) == [C.NEAR_OVERLOAD, C.NEAR_SENSITIVITY]
    assert all(a.window_source == WindowSource.SITE)
    # A 4 dB window: 1.5 dB under overload is fine, 2.5 dB over sensitivity is not.
    wider = WindowOverride(quantity=RX, part_number="HGL-10L-31", rx_sensitivity=-7.0,
                           rx_overload=-3.0)
    assert assess(rx_batch([-4.5]), overrides=[wider]).instant[0] == C.NEAR_SENSITIVITY


def test_dark_and_admin_down():
    b = BatchBuilder("harrow-core-1")
    up = b.add_optic(lr_optic("eth1/1", admin_up=True))
    unknown = b.add_optic(lr_optic("eth1/2", admin_up=None))
    down = b.add_optic(lr_optic("eth1/3", admin_up=False))
    for o in (up, unknown, down):
        b.add_power_mw(o, 1, RX, 0.0)
    b.add_power_mw(down, 1, TX, 0.0)
    a = assess(b.build(0.0))
    assert list(a.instant) == [C.DARK, C.DARK, C.HEALTHY, C.HEALTHY]
    assert a.notes[2] == ADMIN_DOWN_NOTE and a.notes[3] == ADMIN_DOWN_NOTE
    assert math.isnan(a.margin_low_db[0])  # no light has no dBm value, so no margin
    assert list(a.optic_condition) == [C.DARK, C.DARK, C.HEALTHY]


@pytest.mark.parametrize(
    "status", [ReadingStatus.UNAVAILABLE, ReadingStatus.UNSUPPORTED, ReadingStatus.INVALID]
)
def test_missing_values_are_unknown_with_a_note(status):
    b = BatchBuilder("harrow-core-1")
    o = b.add_optic(lr_optic())
    b.add(o, 1, RX, None, status, "sensor said so")
    a = assess(b.build(0.0))
    assert a.instant[0] == C.UNKNOWN
    assert status.name.lower() in a.notes[0]
    assert a.optic_condition[0] == C.UNKNOWN


def test_row_without_window_is_shown_not_judged():
    b = BatchBuilder("harrow-core-1")
    o = b.add_optic(lr_optic(pmd=""))
    b.add(o, 1, RX, 7.0)  # would be far over any overload, but nothing declares one
    b.add(o, 1, Quantity.BIAS, 40.0)
    a = assess(b.build(0.0))
    assert list(a.instant) == [C.HEALTHY, C.HEALTHY]
    assert list(a.window_source) == [WindowSource.NONE, WindowSource.NONE]
    assert a.notes[0] == NO_WINDOW_NOTE and a.notes[1] == NO_WINDOW_NOTE


def test_oma_rx_judged_against_the_standards_oma_sensitivity():
    # 10GBASE-LR receiver sensitivity in OMA -12.6 dBm (IEEE 802.3 cl.52, pmd_catalogue.csv,
    # from memory): -16.0 dBm OMA is below it, though above the -14.4 dBm average edge
    # it must never be compared with.
    a = assess(rx_batch([-16.0, -8.0], optic_kw={"rx_power_type": "oma"}))
    assert list(a.instant) == [C.BELOW_SENSITIVITY, C.HEALTHY]
    assert a.low_edge[0] == -12.6 and a.edge_source[0] == WindowSource.PMD_TABLE
    assert "Rx judged in OMA" in a.notes[0]


def test_oma_rx_without_an_oma_row_is_not_judged_by_average_edges():
    # 1000BASE-LX states its receiver in average power only (pmd_catalogue.csv)
    a = assess(rx_batch([-16.0], optic_kw={"rx_power_type": "oma", "pmd": "1000BASE-LX"}))
    assert a.instant[0] == C.HEALTHY
    assert a.window_source[0] == WindowSource.NONE
    assert OMA_NOTE in a.notes[0] and NO_WINDOW_NOTE in a.notes[0]


def test_non_rx_quantities_use_alarm_and_warning_edges():
    t = Thresholds(high_alarm=75.0, low_alarm=-5.0, high_warning=70.0, low_warning=0.0)
    b = BatchBuilder("harrow-core-1")
    values = [50.0, 70.0, 72.0, 76.0, -1.0, -6.0]
    for i, v in enumerate(values):
        o = b.add_optic(lr_optic(f"eth1/{i}", thresholds={Quantity.TEMPERATURE: t}))
        b.add(o, 0, Quantity.TEMPERATURE, v)
    a = assess(b.build(0.0))
    # "past" a threshold: exactly 70.0 is not past the 70.0 high warning
    assert list(a.instant) == [C.HEALTHY, C.HEALTHY, C.WARNING, C.ALARM, C.WARNING, C.ALARM]
    assert all(a.window_source == WindowSource.MODULE)
    assert np.isnan(a.margin_low_db).all()  # margins are for power rows only


def test_tx_power_against_pmd_launch_limits():
    # source: standards.md 10GBASE-LR Tx min -8.2 / max +0.5 dBm (verified). Outside the
    # standard's launch window but with no module level passed: off_standard (a warning:
    # the module itself does not flag it).
    b = BatchBuilder("harrow-core-1")
    o = b.add_optic(lr_optic())
    b.add(o, 1, TX, -9.0)
    b.add(o, 1, TX, -2.0)
    a = assess(b.build(0.0))
    assert list(a.instant) == [C.OFF_STANDARD, C.HEALTHY]
    assert a.margin_low_db[1] == pytest.approx(6.2)


def test_practice_temperature_only_warns():
    # source: standards.md "Rules of thumb": commercial case 0-70 C (practice)
    b = BatchBuilder("harrow-core-1")
    o = b.add_optic(lr_optic())
    b.add(o, 0, Quantity.TEMPERATURE, 95.0)
    b.add(o, 0, Quantity.SUPPLY, 3.30)
    a = assess(b.build(0.0))
    assert list(a.instant) == [C.WARNING, C.HEALTHY]
    assert list(a.window_source) == [WindowSource.PRACTICE, WindowSource.PRACTICE]
    assert "common practice" in a.notes[0]


def test_optic_condition_is_the_worst_row():
    b = BatchBuilder("harrow-core-1")
    t = Thresholds(high_alarm=75.0, low_alarm=-5.0, high_warning=70.0, low_warning=0.0)
    o = b.add_optic(lr_optic("eth1/1", pmd="100GBASE-LR4", lanes=4,
                             thresholds={Quantity.TEMPERATURE: t}))
    # source: 100GBASE-LR4 Rx min -10.6 (standards.md, from memory)
    for lane, v in enumerate([-3.0, -3.0, -9.0, -3.0], start=1):
        b.add(o, lane, RX, v)
    b.add(o, 0, Quantity.TEMPERATURE, 72.0)
    empty = b.add_optic(lr_optic("eth1/2"))
    assert empty == 1
    a = assess(b.build(0.0))
    assert a.instant[2] == C.NEAR_SENSITIVITY and a.instant[4] == C.WARNING
    assert a.optic_condition[0] in (C.NEAR_SENSITIVITY, C.WARNING)  # both severity 2
    assert a.optic_condition[1] == C.UNKNOWN  # an optic with no readings at all


def test_assessment_arrays_align_with_the_batch():
    b = BatchBuilder("harrow-core-1")
    o = b.add_optic(lr_optic())
    for q, v in ((RX, -5.0), (TX, -2.0), (Quantity.BIAS, 6.0), (Quantity.TEMPERATURE, 30.0),
                 (Quantity.SUPPLY, 3.3)):
        b.add(o, 1 if q in (RX, TX, Quantity.BIAS) else 0, q, v)
    batch = b.build(0.0)
    a = assess(batch)
    for name in ("low_edge", "high_edge", "low_warning", "high_warning", "window_source",
                 "margin_low_db", "margin_high_db", "instant", "condition"):
        assert getattr(a, name).shape == (len(batch),), name
    assert a.optic_condition.shape == (1,)
    assert a.instant.dtype == np.int8 and a.window_source.dtype == np.int8


def test_empty_batch():
    a = assess(BatchBuilder("harrow-core-1").build(0.0), tracker=ConditionTracker())
    assert len(a.instant) == 0 and len(a.optic_condition) == 0


def test_lane_override_applies_only_to_its_lane():
    b = BatchBuilder("harrow-core-1")
    o = b.add_optic(lr_optic(pmd="100GBASE-LR4", lanes=4))
    for lane in range(1, 5):
        b.add(o, lane, RX, -6.0)
    ov = WindowOverride(quantity=RX, port="eth1/1", lane=2, rx_sensitivity=-8.0)
    a = assess(b.build(0.0), overrides=[ov])
    assert list(a.instant) == [C.HEALTHY, C.NEAR_SENSITIVITY, C.HEALTHY, C.HEALTHY]
    assert list(a.window_source) == [WindowSource.PMD_TABLE, WindowSource.SITE,
                                     WindowSource.PMD_TABLE, WindowSource.PMD_TABLE]


def test_vectorised_batch_matches_one_row_at_a_time():
    rng = np.random.default_rng(7)
    values = list(rng.uniform(-20.0, 3.0, size=300))
    whole = assess(rx_batch(values))
    resolver = WindowResolver(default_catalogue())
    one_by_one = [int(assess(rx_batch([v]), resolver=resolver).instant[0]) for v in values]
    assert list(whole.instant) == one_by_one


@settings(max_examples=200, deadline=None)
@given(
    value=st.floats(min_value=-30.0, max_value=5.0, allow_nan=False),
    pad=st.floats(min_value=0.0, max_value=20.0, allow_nan=False),
)
def test_margin_invariants(value, pad):
    a = assess(rx_batch([value, value - pad]))
    # The two margins always add up to the window width, 0.5 - (-14.4) = 14.9 dB
    # (standards.md 10GBASE-LR, verified).
    assert a.margin_low_db[0] + a.margin_high_db[0] == pytest.approx(14.9)
    # A pad of N dB lowers the received level by N dB (standards.md, practice): the
    # margin to sensitivity falls by N, the margin to overload grows by N.
    assert a.margin_low_db[0] - a.margin_low_db[1] == pytest.approx(pad, abs=1e-9)
    assert a.margin_high_db[1] - a.margin_high_db[0] == pytest.approx(pad, abs=1e-9)
    cond = Condition(int(a.instant[0]))
    ml, mh = a.margin_low_db[0], a.margin_high_db[0]
    if cond is C.HEALTHY:
        assert ml >= 3.0 and mh >= 1.0
    elif cond is C.BELOW_SENSITIVITY:
        assert ml <= 0.0
    elif cond is C.OVERLOADED:
        assert mh <= 0.0
    elif cond is C.NEAR_SENSITIVITY:
        assert 0.0 < ml < 3.0
    else:
        assert cond is C.NEAR_OVERLOAD and 0.0 < mh < 1.0


def test_with_tracker_condition_lags_instant():
    policy = HysteresisPolicy(hold_s=120.0, clear_hold_s=300.0)
    tracker = ConditionTracker(policy)
    first = assess(rx_batch([-5.0], taken_at=0.0), tracker=tracker)
    assert first.condition[0] == C.HEALTHY
    worse = assess(rx_batch([-12.0], taken_at=60.0), tracker=tracker)
    assert worse.instant[0] == C.NEAR_SENSITIVITY and worse.condition[0] == C.HEALTHY
    assert assess(rx_batch([-12.0], taken_at=120.0), tracker=tracker).condition[0] == C.HEALTHY
    held = assess(rx_batch([-12.0], taken_at=180.0), tracker=tracker)
    assert held.condition[0] == C.NEAR_SENSITIVITY  # 120 s after it was first seen
    assert held.optic_condition[0] == C.NEAR_SENSITIVITY
