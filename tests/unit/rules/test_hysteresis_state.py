"""Held conditions survive a restart: the tracker's saved state, taken up again.

Readings are 10GBASE-LR Rx power against the IEEE 802.3 cl.52 window from standards.md
(minimum average receive power -14.4 dBm; verified) with the common-practice 3 dB
sensitivity target (standards.md "Rules of thumb"); 0.5 dB hysteresis and the holds are
our own defaults (rules/hysteresis.py), not a standard's.
"""

from __future__ import annotations

import json

import pytest

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity
from lightwarden.rules.assess import assess
from lightwarden.rules.catalogue import default_catalogue
from lightwarden.rules.findings import Condition
from lightwarden.rules.hysteresis import TRACKER_SCHEMA, ConditionTracker, HysteresisPolicy
from lightwarden.rules.windows import WindowResolver

C = Condition
RX = Quantity.RX_POWER
SENS = -14.4  # 10GBASE-LR minimum average receive power (standards.md, verified)
NEAR_EDGE = SENS + 3.0  # the 3 dB sensitivity target (common practice)
DEVICE = "harrow-core-1"
KEY = (DEVICE, "eth1/1", 1, int(RX))
RESOLVER = WindowResolver(default_catalogue())


def poll(tracker: ConditionTracker, t: float, value: float, serial: str = "HG0001"
         ) -> Condition:
    """One poll of one 10GBASE-LR Rx lane at virtual time t; returns the held condition."""
    b = BatchBuilder(DEVICE)
    o = b.add_optic(OpticIdentity(DEVICE, "eth1/1", pmd="10GBASE-LR", serial=serial,
                                  admin_up=True))
    b.add(o, 1, RX, value)
    a = assess(b.build(t), tracker=tracker, resolver=RESOLVER)
    return Condition(int(a.condition[0]))


def restarted(tracker: ConditionTracker, policy: HysteresisPolicy) -> ConditionTracker:
    """A new tracker that took up what the old one saved, through JSON as on disk."""
    saved = json.loads(json.dumps(tracker.snapshot_devices(), allow_nan=False))
    fresh = ConditionTracker(policy)
    for body in saved.values():
        assert fresh.load_device(body) == 0
    return fresh


def test_a_reading_held_in_its_hysteresis_band_stays_held_across_a_restart():
    policy = HysteresisPolicy(hold_s=60.0, clear_hold_s=120.0)
    t = ConditionTracker(policy)
    # 0.2 dB below the target for 2 minutes: near-sensitivity is adopted after the hold
    for s in range(0, 130, 10):
        held = poll(t, float(s), NEAR_EDGE - 0.2)
    assert held is C.NEAR_SENSITIVITY
    # back 0.2 dB above the target: inside the 0.5 dB hysteresis, so it stays near
    assert poll(t, 140.0, NEAR_EDGE + 0.2) is C.NEAR_SENSITIVITY
    # A tracker that starts afresh adopts the first sample at once: the flap we prevent.
    assert poll(ConditionTracker(policy), 150.0, NEAR_EDGE + 0.2) is C.HEALTHY
    back = restarted(t, policy)
    for s in range(150, 600, 10):
        assert poll(back, float(s), NEAR_EDGE + 0.2) is C.NEAR_SENSITIVITY


def test_a_pending_change_keeps_its_start_across_a_restart():
    policy = HysteresisPolicy(hold_s=60.0, clear_hold_s=120.0)
    t = ConditionTracker(policy)
    poll(t, 0.0, NEAR_EDGE + 2.0)  # healthy, adopted at once
    assert poll(t, 10.0, NEAR_EDGE - 1.0) is C.HEALTHY  # worse; its hold starts at 10 s
    before = t.get(KEY)
    back = restarted(t, policy)
    after = back.get(KEY)
    assert after == before
    assert poll(back, 60.0, NEAR_EDGE - 1.0) is C.HEALTHY  # 50 s: not yet
    assert poll(back, 70.0, NEAR_EDGE - 1.0) is C.NEAR_SENSITIVITY  # 60 s after 10 s


def test_a_swapped_module_still_starts_afresh_after_a_restore():
    policy = HysteresisPolicy(hold_s=60.0, clear_hold_s=120.0)
    t = ConditionTracker(policy)
    for s in range(0, 130, 10):
        poll(t, float(s), NEAR_EDGE - 0.2)
    back = restarted(t, policy)
    # a new serial on the port: no state carried over, first sample adopted
    assert poll(back, 140.0, NEAR_EDGE + 0.2, serial="HG0002") is C.HEALTHY


def test_unknown_codes_drop_only_their_row_and_another_schema_is_refused():
    policy = HysteresisPolicy()
    t = ConditionTracker(policy)
    poll(t, 0.0, NEAR_EDGE - 1.0)
    body = t.snapshot_devices()[DEVICE]
    assert body["schema"] == TRACKER_SCHEMA
    good = body["rows"][0]
    unknown = list(good)
    unknown[0] = "eth1/2"
    unknown[4] = 250  # a condition code from a newer version
    bad_quantity = list(good)
    bad_quantity[0], bad_quantity[2] = "eth1/3", 99
    damaged = ["eth1/4", "x"]
    fresh = ConditionTracker(policy)
    assert fresh.load_device({**body, "rows": [good, unknown, bad_quantity, damaged]}) == 3
    assert fresh.get(KEY) is not None and fresh.get(KEY).condition is C.NEAR_SENSITIVITY
    assert fresh.get((DEVICE, "eth1/2", 1, KEY[3])) is None
    with pytest.raises(ValueError, match="schema"):
        ConditionTracker(policy).load_device({**body, "schema": TRACKER_SCHEMA + 1})
    with pytest.raises(ValueError):
        ConditionTracker(policy).load_device({"schema": TRACKER_SCHEMA, "rows": "x"})


def test_only_changed_devices_are_dirty():
    t = ConditionTracker(HysteresisPolicy(hold_s=60.0, clear_hold_s=120.0))
    poll(t, 0.0, NEAR_EDGE + 2.0)
    assert t.dirty
    assert list(t.snapshot_devices(dirty=True)) == [DEVICE]
    assert not t.dirty
    poll(t, 10.0, NEAR_EDGE + 2.1)  # same held state: nothing to save
    assert not t.dirty
    poll(t, 20.0, NEAR_EDGE - 1.0)  # a candidate appeared
    assert t.dirty
