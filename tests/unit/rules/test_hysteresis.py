"""Held conditions on a virtual clock: hold times, hysteresis, DARK and UNKNOWN.

Readings are 10GBASE-LR Rx power, judged against the IEEE 802.3 cl.52 window from
standards.md (minimum average receive power -14.4 dBm, overload +0.5 dBm; verified) with
the common-practice 3 dB sensitivity target (standards.md "Rules of thumb"). The hold
times and the 0.5 dB hysteresis are our own defaults (rules/hysteresis.py), not a
standard's.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity, ReadingStatus
from lightwarden.rules.assess import assess
from lightwarden.rules.catalogue import default_catalogue
from lightwarden.rules.findings import Condition
from lightwarden.rules.hysteresis import (
    NO_CONDITION,
    ConditionTracker,
    HysteresisPolicy,
    TrackState,
    step,
)
from lightwarden.rules.windows import WindowResolver

C = Condition
RX = Quantity.RX_POWER
SENS = -14.4  # 10GBASE-LR minimum average receive power (standards.md, verified)
NEAR_EDGE = SENS + 3.0  # the 3 dB sensitivity target (practice)
KEY = ("harrow-core-1", "eth1/1", 1, int(RX))
RESOLVER = WindowResolver(default_catalogue())


def poll(tracker, t, value, serial="HG0001", status=ReadingStatus.OK):
    """One poll of one 10GBASE-LR Rx lane at virtual time t; returns the held condition."""
    b = BatchBuilder("harrow-core-1")
    o = b.add_optic(OpticIdentity("harrow-core-1", "eth1/1", pmd="10GBASE-LR",
                                  serial=serial, admin_up=True))
    if value is None and status is ReadingStatus.OK:
        b.add_power_mw(o, 1, RX, 0.0)
    else:
        b.add(o, 1, RX, value, status)
    a = assess(b.build(t), tracker=tracker, resolver=RESOLVER)
    return Condition(int(a.condition[0]))


def run(tracker, samples):
    """samples: [(t, value)] -> [(t, held condition)]"""
    return [(t, poll(tracker, t, v)) for t, v in samples]


def changes(history):
    return [(t, c) for (t, c), (_, prev) in zip(history[1:], history[:-1], strict=True)
            if c != prev]


def test_hovering_around_a_target_changes_at_most_once_per_hold():
    # +-0.2 dB around sensitivity + 3 dB, a sample every 10 s for an hour of virtual time
    policy = HysteresisPolicy()
    tracker = ConditionTracker(policy)
    samples = [(float(t), NEAR_EDGE + (0.2 if (t // 10) % 2 else -0.2))
               for t in range(0, 3600, 10)]
    history = run(tracker, samples)
    times = [t for t, _ in changes(history)]
    gaps = np.diff([0.0, *times])
    assert (gaps >= policy.hold_s).all()
    # Alternating samples never hold for 120 s, so in fact the condition never moves.
    assert times == []


def test_random_noise_around_an_edge_never_flaps():
    rng = np.random.default_rng(3)
    policy = HysteresisPolicy(hold_s=60.0, clear_hold_s=120.0)
    tracker = ConditionTracker(policy)
    samples = [(float(t), NEAR_EDGE + float(rng.uniform(-0.4, 0.4))) for t in range(0, 3600, 10)]
    history = run(tracker, samples)
    times = [t for t, _ in changes(history)]
    assert (np.diff([0.0, *times]) >= policy.hold_s).all()
    # Once near-sensitivity is held, noise of +-0.4 dB never reaches target + 0.5 dB hysteresis.
    first_near = next((t for t, c in history if c is C.NEAR_SENSITIVITY), None)
    if first_near is not None:
        assert all(c is C.NEAR_SENSITIVITY for t, c in history if t >= first_near)


@settings(max_examples=40, deadline=None)
@given(
    offsets=st.lists(st.floats(min_value=-4.0, max_value=4.0, allow_nan=False),
                     min_size=5, max_size=80),
    hold=st.sampled_from([30.0, 60.0, 120.0]),
)
def test_changes_are_spaced_by_at_least_the_hold(offsets, hold):
    # Except for DARK (immediate), every change waits its hold: the gap between two
    # changes is at least the shorter of the two holds.
    policy = HysteresisPolicy(hold_s=hold, clear_hold_s=hold * 2)
    tracker = ConditionTracker(policy)
    history = run(tracker, [(i * 10.0, NEAR_EDGE + off) for i, off in enumerate(offsets)])
    times = [t for t, _ in changes(history)]
    assert (np.diff([0.0, *times]) >= hold).all()


def test_a_real_crossing_is_adopted_after_the_hold():
    policy = HysteresisPolicy(hold_s=120.0, clear_hold_s=300.0)
    tracker = ConditionTracker(policy)
    healthy = SENS + 6.0
    near = SENS + 2.0
    history = run(tracker, [(float(t), healthy if t < 600 else near) for t in range(0, 1200, 10)])
    assert changes(history) == [(720.0, C.NEAR_SENSITIVITY)]  # 600 + 120 s
    assert tracker.get(KEY).since == 720.0


def test_clearing_needs_hysteresis_and_the_clear_hold():
    policy = HysteresisPolicy(hold_s=60.0, clear_hold_s=300.0, hysteresis_db=0.5)
    tracker = ConditionTracker(policy)
    run(tracker, [(0.0, SENS + 2.0)])  # first sample adopted at once
    assert tracker.get(KEY).condition is C.NEAR_SENSITIVITY
    # Back above the 3 dB target but by less than the 0.5 dB hysteresis: no clear, ever.
    history = run(tracker, [(float(t), SENS + 3.3) for t in range(10, 3600, 10)])
    assert changes(history) == [] and history[-1][1] is C.NEAR_SENSITIVITY
    # Clearly back (3.6 dB > 3.0 + 0.5): cleared 300 s after the first such sample.
    history = run(tracker, [(float(t), SENS + 3.6) for t in range(3600, 4200, 10)])
    assert changes([(3590.0, C.NEAR_SENSITIVITY), *history]) == [(3900.0, C.HEALTHY)]


def test_improvement_steps_to_what_the_value_supports():
    # From below sensitivity to 3.2 dB above it: the strict judgement (target + 0.5 dB)
    # only supports near-sensitivity, so that is where it clears to.
    tracker = ConditionTracker(HysteresisPolicy(hold_s=60.0, clear_hold_s=120.0))
    run(tracker, [(0.0, SENS - 1.0)])
    assert tracker.get(KEY).condition is C.BELOW_SENSITIVITY
    history = run(tracker, [(float(t), SENS + 3.2) for t in range(10, 400, 10)])
    assert changes([(0.0, C.BELOW_SENSITIVITY), *history]) == [(130.0, C.NEAR_SENSITIVITY)]


def test_sliding_worse_adopts_what_held_then_needs_another_hold():
    tracker = ConditionTracker(HysteresisPolicy(hold_s=120.0, clear_hold_s=300.0))
    samples = [(0.0, SENS + 6.0), (10.0, SENS + 2.0), (40.0, SENS - 1.0)]
    samples += [(float(t), SENS - 1.0) for t in range(50, 500, 10)]
    history = run(tracker, samples)
    # Near-sensitivity held from 10 s (every later sample was at least that bad): adopted
    # at 130 s. Below-sensitivity must then hold on its own: adopted at 260 s.
    assert changes(history) == [(130.0, C.NEAR_SENSITIVITY), (260.0, C.BELOW_SENSITIVITY)]


def test_dark_is_immediate_and_clears_only_after_the_clear_hold():
    tracker = ConditionTracker(HysteresisPolicy(hold_s=120.0, clear_hold_s=300.0))
    run(tracker, [(0.0, -5.0)])
    assert poll(tracker, 60.0, None) is C.DARK
    # Light flapping on and off keeps it DARK.
    flapping = [(60.0 + 60 * i, -5.0 if i % 2 else None) for i in range(1, 21)]  # ends dark
    assert {c for _, c in run(tracker, flapping)} == {C.DARK}
    steady = run(tracker, [(2000.0 + 60 * i, -5.0) for i in range(10)])
    assert changes([(1999.0, C.DARK), *steady]) == [(2300.0, C.HEALTHY)]


def test_a_single_missing_reading_does_not_resolve_a_problem():
    tracker = ConditionTracker(HysteresisPolicy(hold_s=120.0, clear_hold_s=300.0))
    run(tracker, [(0.0, SENS - 2.0)])
    assert poll(tracker, 60.0, None, status=ReadingStatus.UNAVAILABLE) is C.BELOW_SENSITIVITY
    assert poll(tracker, 120.0, SENS - 2.0) is C.BELOW_SENSITIVITY
    # A long gap does become UNKNOWN, after the hold; the first value back counts at once.
    gap = [poll(tracker, t, None, status=ReadingStatus.UNAVAILABLE) for t in (180.0, 240.0, 300.0)]
    assert gap == [C.BELOW_SENSITIVITY, C.BELOW_SENSITIVITY, C.UNKNOWN]
    assert poll(tracker, 360.0, -5.0) is C.HEALTHY


def test_a_swapped_module_starts_afresh():
    tracker = ConditionTracker(HysteresisPolicy(hold_s=120.0, clear_hold_s=300.0))
    run(tracker, [(0.0, SENS - 2.0)])
    assert poll(tracker, 60.0, -5.0, serial="HG0001") is C.BELOW_SENSITIVITY
    assert poll(tracker, 120.0, -5.0, serial="HG0777") is C.HEALTHY  # new serial, new row


def test_zero_holds_follow_the_instant_condition_when_worsening():
    tracker = ConditionTracker(HysteresisPolicy(hold_s=0.0, clear_hold_s=0.0, hysteresis_db=0.0))
    values = [-5.0, SENS + 2.0, SENS - 1.0, -5.0, 0.2]
    history = run(tracker, [(float(i), v) for i, v in enumerate(values)])
    assert [c for _, c in history] == [C.HEALTHY, C.NEAR_SENSITIVITY, C.BELOW_SENSITIVITY,
                                       C.HEALTHY, C.NEAR_OVERLOAD]


def test_step_is_pure_and_columnar():
    state = TrackState.empty(3)
    policy = HysteresisPolicy(hold_s=60.0, clear_hold_s=60.0)
    instant = np.array([C.HEALTHY, C.NEAR_OVERLOAD, C.DARK], dtype=np.int8)
    s1 = step(state, instant, instant, 0.0, policy)
    assert (state.condition == NO_CONDITION).all()  # input untouched
    assert list(s1.condition) == [C.HEALTHY, C.NEAR_OVERLOAD, C.DARK]
    worse = np.array([C.WARNING, C.OVERLOADED, C.DARK], dtype=np.int8)
    s2 = step(s1, worse, worse, 30.0, policy)
    assert list(s2.condition) == list(s1.condition)
    assert list(s2.candidate) == [C.WARNING, C.OVERLOADED, NO_CONDITION]
    s3 = step(s2, worse, worse, 90.0, policy)
    assert list(s3.condition) == [C.WARNING, C.OVERLOADED, C.DARK]
    assert list(s3.since) == [90.0, 90.0, 0.0]


def test_step_rejects_strict_better_than_instant_by_construction():
    # strict better than instant cannot make a row improve past what instant shows.
    policy = HysteresisPolicy(hold_s=0.0, clear_hold_s=0.0)
    s = step(TrackState.empty(1), np.array([C.ALARM], np.int8), np.array([C.ALARM], np.int8),
             0.0, policy)
    s = step(s, np.array([C.ALARM], np.int8), np.array([C.HEALTHY], np.int8), 1.0, policy)
    assert s.condition[0] == C.ALARM


def test_many_rows_in_one_update_are_independent():
    tracker = ConditionTracker(HysteresisPolicy(hold_s=60.0, clear_hold_s=60.0), capacity=2)
    keys = [("harrow-core-1", f"eth1/{i}", 1, int(RX)) for i in range(50)]
    healthy = np.zeros(50, dtype=np.int8)
    tracker.update(keys, healthy, healthy, 0.0)
    worse = healthy.copy()
    worse[7] = C.BELOW_SENSITIVITY
    tracker.update(keys, worse, worse, 10.0)
    out = tracker.update(keys, worse, worse, 70.0)
    assert out[7] == C.BELOW_SENSITIVITY and (np.delete(out, 7) == C.HEALTHY).all()
    assert len(tracker) == 50


def test_prune_forgets_rows_not_seen():
    tracker = ConditionTracker()
    a = [("harrow-core-1", "eth1/1", 1, int(RX))]
    b = [("harrow-core-1", "eth1/2", 1, int(RX))]
    ok = np.zeros(1, dtype=np.int8)
    tracker.update(a, ok, ok, 0.0)
    tracker.update(b, ok, ok, 1000.0)
    assert tracker.prune(now=1000.0, max_age_s=500.0) == 1
    assert tracker.get(a[0]) is None and tracker.get(b[0]).condition is C.HEALTHY
    bad = np.array([C.ALARM], dtype=np.int8)
    assert tracker.update(b, bad, bad, 1010.0)[0] == C.HEALTHY  # state survived compaction


def test_policy_validation():
    with pytest.raises(ValueError, match="hold_s"):
        HysteresisPolicy(hold_s=-1.0)
