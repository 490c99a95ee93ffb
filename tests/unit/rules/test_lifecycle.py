"""Alert lifecycle on a virtual clock: holds, stale, resolve, sequences, persistence.

The row conditions are given (hand-built Assessments); what is under test is what the
lifecycle sends for them. Expected timings follow from the configured holds.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from support.assessments import (
    DEVICE,
    ER_OVERLOAD,
    PORT,
    build_assessment,
    empty_assessment,
    rx_assessment,
)

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity
from lightwarden.rules.advice import LASER_CAUTION, AdviceContext
from lightwarden.rules.findings import (
    AlertKind,
    AlertSeverity,
    Condition,
    WindowSource,
)
from lightwarden.rules.lifecycle import (
    AlertLifecycle,
    LifecycleConfig,
    LifecycleState,
    PolicyOverride,
    alert_key,
)

T0 = 1_800_000_000.0
POLL = 60.0
KEY = f"{DEVICE}|{PORT}|1|rx_power"

NEAR = Condition.NEAR_OVERLOAD
OK = Condition.HEALTHY


def kinds(events):
    return [e.kind for e in events]


def test_hovering_reading_opens_one_alert_and_resolves_once():
    life = AlertLifecycle(LifecycleConfig(resolve_hold_s=300.0))
    events = []
    # Rx hovering at the near-overload line: the condition flips every poll for an hour.
    for k in range(60):
        near = k % 2 == 0
        value = -1.9 if near else -2.1
        events += life.observe(
            rx_assessment(value, NEAR if near else OK, T0 + k * POLL), T0 + k * POLL
        )
    assert kinds(events) == ["open"]
    # Then it settles clear: one resolve, once the resolve hold has run out.
    t = T0 + 60 * POLL
    settled = []
    for k in range(10):
        settled += life.observe(rx_assessment(-5.0, OK, t + k * POLL), t + k * POLL)
    assert kinds(settled) == ["resolve"]
    assert settled[0].at - settled[0].ends_at >= 300.0
    assert life.state.tracks == {}


def test_real_crossing_waits_for_open_and_resolve_holds():
    cfg = LifecycleConfig(open_hold_s=120.0, resolve_hold_s=300.0)
    life = AlertLifecycle(cfg)
    assert life.observe(rx_assessment(-5.0, OK, T0), T0) == []
    bad_since = T0 + 60
    seen = {}
    for t in np.arange(bad_since, bad_since + 600, POLL):
        seen[float(t)] = life.observe(rx_assessment(-1.5, NEAR, float(t)), float(t))
    opened = [t for t, ev in seen.items() if ev]
    # Opens on the first poll at least open_hold_s after the condition first showed.
    assert opened == [bad_since + 120]
    (event,) = seen[bad_since + 120]
    assert event.kind == "open" and event.starts_at == bad_since
    clear_since = bad_since + 600
    out = {}
    for t in np.arange(clear_since, clear_since + 420, POLL):
        out[float(t)] = life.observe(rx_assessment(-6.0, OK, float(t)), float(t))
    resolved = [(t, ev) for t, ev in out.items() if ev]
    assert [t for t, _ in resolved] == [clear_since + 300]
    (res,) = resolved[0][1]
    assert res.kind == "resolve" and res.ends_at == clear_since and res.starts_at == bad_since
    assert res.advice == "" and res.caution == ""


def test_condition_that_clears_within_open_hold_sends_nothing():
    life = AlertLifecycle(LifecycleConfig(open_hold_s=300.0))
    events = life.observe(rx_assessment(-1.5, NEAR, T0), T0)
    events += life.observe(rx_assessment(-1.5, NEAR, T0 + 60), T0 + 60)
    events += life.observe(rx_assessment(-4.0, OK, T0 + 120), T0 + 120)
    events += life.observe(rx_assessment(-1.5, NEAR, T0 + 180), T0 + 180)
    assert events == []  # the hold restarted at T0 + 180


def test_open_event_carries_edge_margin_words_and_caution():
    life = AlertLifecycle()
    (ev,) = life.observe(rx_assessment(-1.6, NEAR, T0), T0)
    assert ev.kind == "open" and ev.sequence == 1 and ev.key == KEY
    assert ev.alertname == "OpticRxNearOverload" and ev.severity == "warning"
    assert (ev.device, ev.port, ev.lane, ev.quantity, ev.unit) == (
        DEVICE,
        PORT,
        1,
        Quantity.RX_POWER,
        "dBm",
    )
    assert ev.edge_name == "overload" and ev.edge_value == ER_OVERLOAD
    assert ev.margin_db == pytest.approx(0.6)  # overload - Rx = -1.0 - (-1.6)
    assert ev.window_source is WindowSource.PMD_TABLE and ev.condition is NEAR
    assert "attenuator" in ev.advice and ev.caution == LASER_CAUTION
    assert "0.6 dB below overload" in ev.summary


def test_dark_and_threshold_conditions_name_their_alerts():
    life = AlertLifecycle()
    (dark,) = life.observe(rx_assessment(None, Condition.DARK, T0), T0)
    assert (dark.alertname, dark.severity, dark.value, dark.margin_db) == (
        "OpticDark",
        "critical",
        None,
        None,
    )
    assert dark.caution == LASER_CAUTION

    b = BatchBuilder("hgl-edge-2")
    o = b.add_optic(OpticIdentity(device="hgl-edge-2", port="sfp10"))
    b.add(o, 0, Quantity.TEMPERATURE, 74.0)
    b.add(o, 0, Quantity.SUPPLY, 3.31)
    a = build_assessment(
        b.build(T0),
        [Condition.WARNING, OK],
        low_edge=[-5.0, 3.0],
        high_edge=[80.0, 3.6],
        low_warning=[0.0, 3.13],
        high_warning=[70.0, 3.47],
    )
    (warm,) = AlertLifecycle().observe(a, T0)
    assert warm.alertname == "OpticThresholdWarning" and warm.severity == "warning"
    assert (warm.lane, warm.quantity, warm.edge_name, warm.edge_value) == (
        0,
        Quantity.TEMPERATURE,
        "high_warning",
        70.0,
    )
    assert "airflow" in warm.advice.lower() and warm.caution == ""


def test_updates_only_on_material_change_and_sequence_counts_every_event():
    life = AlertLifecycle()
    seqs = []
    for t, value, cond in [
        (T0, -1.8, NEAR),  # open
        (T0 + 60, -1.6, NEAR),  # moved 0.2 dB: not material
        (T0 + 120, -2.4, NEAR),  # moved 0.6 dB from what was sent (-1.8): still not
        (T0 + 180, -0.5, Condition.OVERLOADED),  # condition changed: update
        (T0 + 240, -0.4, Condition.OVERLOADED),
        (T0 + 300, -5.0, OK),  # resolve (resolve hold 0 by default)
        (T0 + 360, -1.5, NEAR),  # a new alert on the same key continues the count
    ]:
        for ev in life.observe(rx_assessment(value, cond, t), t):
            seqs.append((ev.kind, ev.sequence, ev.alertname, ev.severity))
    assert seqs == [
        ("open", 1, "OpticRxNearOverload", "warning"),
        ("update", 2, "OpticRxOverloaded", "critical"),
        ("resolve", 3, "OpticRxOverloaded", "critical"),
        ("open", 4, "OpticRxNearOverload", "warning"),
    ]


def test_update_step_is_configurable_per_quantity_and_lane():
    cfg = LifecycleConfig(
        per_quantity={Quantity.RX_POWER: PolicyOverride(update_step=0.5)},
        per_lane={(Quantity.RX_POWER, 2): PolicyOverride(update_step=3.0)},
    )
    assert cfg.policy(Quantity.RX_POWER, 1).update_step == 0.5
    assert cfg.policy(Quantity.RX_POWER, 2).update_step == 3.0
    assert cfg.policy(Quantity.TX_POWER, 1).update_step == 1.0
    life = AlertLifecycle(cfg)
    life.observe(rx_assessment(-1.8, NEAR, T0), T0)
    assert kinds(life.observe(rx_assessment(-2.3, NEAR, T0 + 60), T0 + 60)) == ["update"]
    life.observe(rx_assessment(-1.8, NEAR, T0, lane=2), T0)
    assert life.observe(rx_assessment(-2.3, NEAR, T0 + 60, lane=2), T0 + 60) == []


def test_bad_hold_settings_are_refused_with_their_names():
    cfg = LifecycleConfig(per_lane={(Quantity.BIAS, 3): PolicyOverride(resolve_hold_s=-1.0)})
    with pytest.raises(ValueError, match=r"resolve_hold_s.*bias lane 3"):
        cfg.policy(Quantity.BIAS, 3)


def test_stale_then_device_returns_still_bad_continues_the_alert():
    life = AlertLifecycle()
    life.observe(rx_assessment(-1.5, NEAR, T0), T0)
    stale = life.mark_stale(DEVICE, T0 + 60)
    assert kinds(stale) == ["stale"] and stale[0].sequence == 2
    assert stale[0].ends_at is None and stale[0].starts_at == T0
    assert stale[0].summary.startswith(f"No answer from {DEVICE}")
    assert life.mark_stale(DEVICE, T0 + 120) == []  # one stale event per outage
    back = life.observe(rx_assessment(-1.5, NEAR, T0 + 180), T0 + 180)
    # Same value as before the outage, still an update: the receiver must learn it is live.
    assert kinds(back) == ["update"] and back[0].sequence == 3
    assert life.observe(rx_assessment(-1.5, NEAR, T0 + 240), T0 + 240) == []


def test_stale_then_device_returns_clear_resolves_after_the_hold():
    life = AlertLifecycle(LifecycleConfig(resolve_hold_s=300.0))
    life.observe(rx_assessment(-1.5, NEAR, T0), T0)
    life.observe(rx_assessment(-3.0, OK, T0 + 60), T0 + 60)  # clearing starts...
    assert kinds(life.mark_stale(DEVICE, T0 + 120)) == ["stale"]  # ...and is interrupted
    events = []
    for k in range(3, 12):
        t = T0 + k * 60
        events += life.observe(rx_assessment(-3.0, OK, t), t)
    (res,) = events
    # The clear run restarted when the device came back (T0 + 180), not at T0 + 60.
    assert res.kind == "resolve" and res.ends_at == T0 + 180 and res.at == T0 + 480


def test_stale_device_back_clear_then_bad_again_sends_update():
    life = AlertLifecycle(LifecycleConfig(resolve_hold_s=300.0))
    life.observe(rx_assessment(-1.5, NEAR, T0), T0)
    life.mark_stale(DEVICE, T0 + 60)
    assert life.observe(rx_assessment(-3.0, OK, T0 + 120), T0 + 120) == []
    assert kinds(life.observe(rx_assessment(-1.5, NEAR, T0 + 180), T0 + 180)) == ["update"]


def test_stale_drops_pending_alerts_and_never_touches_other_devices():
    life = AlertLifecycle(LifecycleConfig(open_hold_s=600.0))
    life.observe(rx_assessment(-1.5, NEAR, T0), T0)
    other = AlertLifecycle()
    assert life.mark_stale(DEVICE, T0 + 60) == []
    assert life.state.tracks == {}
    other.observe(rx_assessment(-1.5, NEAR, T0, device="hgl-core-2"), T0)
    assert other.mark_stale(DEVICE, T0 + 60) == []


def test_unknown_row_neither_resolves_nor_updates():
    life = AlertLifecycle()
    life.observe(rx_assessment(-1.5, NEAR, T0), T0)
    assert life.observe(rx_assessment(None, Condition.UNKNOWN, T0 + 60), T0 + 60) == []
    assert KEY in life.state.tracks


def test_vanished_optic_resolves_after_the_gone_hold():
    life = AlertLifecycle()  # defaults: gone_hold_s 300
    life.observe(rx_assessment(-1.5, NEAR, T0), T0)
    events = []
    for k in range(1, 8):
        events += life.observe(empty_assessment(T0 + k * 60), T0 + k * 60)
    (res,) = events
    assert res.kind == "resolve" and res.ends_at == T0 + 60 and res.at == T0 + 360
    assert "no longer reported" in res.summary and res.value is None


def test_key_is_stable_across_instances_and_escapes_separators():
    a, b = AlertLifecycle(), AlertLifecycle()
    ea = a.observe(rx_assessment(-1.5, NEAR, T0), T0)
    eb = b.observe(rx_assessment(-1.5, NEAR, T0 + 5), T0 + 5)
    assert ea[0].key == eb[0].key == KEY
    assert alert_key("hgl|x", "p%1", 2, Quantity.BIAS) == "hgl%7Cx|p%251|2|bias"


def test_snapshot_round_trip_neither_reopens_nor_duplicates():
    cfg = LifecycleConfig(open_hold_s=120.0, resolve_hold_s=300.0)
    live = AlertLifecycle(cfg)
    # Key 1 open; lane 2 pending; lane 3 open then clearing; a second device stale.
    for t in (T0, T0 + 120):
        live.observe(rx_assessment(-1.5, NEAR, t), t)
        live.observe(rx_assessment(-1.5, NEAR, t, lane=3), t)
    live.observe(rx_assessment(-1.5, NEAR, T0 + 120, lane=2), T0 + 120)
    live.observe(rx_assessment(-4.0, OK, T0 + 180, lane=3), T0 + 180)
    for t in (T0, T0 + 120):
        live.observe(rx_assessment(-1.5, NEAR, t, device="hgl-core-2"), t)
    live.mark_stale("hgl-core-2", T0 + 180)

    stored = json.dumps(live.snapshot())  # what the service would keep in SQLite
    restored = AlertLifecycle.restore(json.loads(stored), cfg)
    assert restored.snapshot() == live.snapshot()

    # From here both must behave identically, event for event.
    script = [
        (T0 + 240, dict(value=-1.5, condition=NEAR)),
        (T0 + 240, dict(value=-1.5, condition=NEAR, lane=2)),
        (T0 + 480, dict(value=-4.0, condition=OK, lane=3)),
        (T0 + 480, dict(value=-1.4, condition=NEAR, device="hgl-core-2")),
    ]
    for t, kw in script:
        value, cond = kw.pop("value"), kw.pop("condition")
        assert restored.observe(rx_assessment(value, cond, t, **kw), t) == live.observe(
            rx_assessment(value, cond, t, **kw), t
        )
    first = restored.observe(rx_assessment(-1.5, NEAR, T0 + 540), T0 + 540)
    assert first == []  # key 1 stays open: no second "open"


def test_snapshot_events_from_restored_state_are_specific():
    live = AlertLifecycle()
    live.observe(rx_assessment(-1.5, NEAR, T0), T0)
    restored = AlertLifecycle.restore(json.loads(json.dumps(live.snapshot())))
    (ev,) = restored.observe(rx_assessment(-5.0, OK, T0 + 60), T0 + 60)
    assert (ev.kind, ev.sequence, ev.starts_at, ev.ends_at) == ("resolve", 2, T0, T0 + 60)


@pytest.mark.parametrize(
    ("mutate", "message"),
    [
        (lambda d: d.update(format="other/9"), "format"),
        (lambda d: d["tracks"][KEY].update(phase="sleeping"), r"tracks\[.*\]\.phase"),
        (lambda d: d["tracks"][KEY].update(condition="wobbly"), r"\.condition"),
        (lambda d: d["tracks"][KEY]["last"].update(quantity="rx_powr"), r"\.last\.quantity"),
        (lambda d: d["tracks"][KEY]["last"].update(kind="opened"), r"\.last\.kind"),
        (lambda d: d["tracks"][KEY]["last"].update(severity=2), r"\.last\.severity"),
        (lambda d: d["tracks"][KEY]["last"].update(window_source=None), r"\.last\.window_source"),
        (lambda d: d["tracks"][KEY].update(last=None), "needs the last event"),
        (lambda d: d["tracks"][KEY].update(since="yesterday"), r"\.since"),
        (lambda d: d["sequences"].update({KEY: -3}), r"sequences\["),
    ],
)
def test_bad_snapshot_is_refused_with_where(mutate, message):
    live = AlertLifecycle()
    live.observe(rx_assessment(-1.5, NEAR, T0), T0)
    data = json.loads(json.dumps(live.snapshot()))
    mutate(data)
    with pytest.raises(ValueError, match=message):
        LifecycleState.from_dict(data)


def test_misaligned_assessment_is_refused():
    a = rx_assessment(-1.5, NEAR, T0)
    a.condition = np.zeros(2, dtype=np.int8)
    with pytest.raises(ValueError, match=rf"{DEVICE}: condition has 2 rows, the batch has 1"):
        AlertLifecycle().observe(a, T0)


def test_context_adds_rate_and_history_to_the_advice():
    ctx = {(PORT, 1, Quantity.RX_POWER): AdviceContext(span_growth_db=2.0, rate_per_day=-0.02)}
    (ev,) = AlertLifecycle().observe(rx_assessment(-13.5, Condition.NEAR_SENSITIVITY, T0), T0, ctx)
    assert ev.rate_per_day == -0.02
    assert ev.edge_name == "sensitivity" and ev.margin_db == pytest.approx(2.3)
    assert "grown 2.0 dB" in ev.advice and ev.caution == LASER_CAUTION


def test_restore_without_counters_never_reuses_a_sent_sequence():
    live = AlertLifecycle()
    live.observe(rx_assessment(-1.8, NEAR, T0), T0)
    live.observe(rx_assessment(-0.5, Condition.OVERLOADED, T0 + 60), T0 + 60)  # update, seq 2
    data = json.loads(json.dumps(live.snapshot()))
    data["sequences"] = {}  # e.g. an older row written before the counters were stored
    restored = AlertLifecycle.restore(data)
    (ev,) = restored.mark_stale(DEVICE, T0 + 120)
    assert ev.sequence == 3


#: A snapshot the lifecycle wrote before its events were typed (every field a word):
#: hgl-core-1 stopped answering at T0 + 120 with two open alerts, near overload on sfp7
#: (since T0) and dark on sfp9 (since T0 + 60), each at sequence 2.
UNTYPED_SNAPSHOT = Path(__file__).parent / "data" / "lifecycle" / "snapshot_v1_untyped.json"


def test_snapshot_written_before_typed_events_still_restores():
    raw = json.loads(UNTYPED_SNAPSHOT.read_text())
    assert raw["format"] == "lightwarden.lifecycle/1"
    life = AlertLifecycle.restore(raw)
    near, dark = life.open_alerts()  # ordered by key: sfp7, then sfp9
    assert (near.kind, near.severity, near.quantity, near.condition, near.window_source) == (
        AlertKind.STALE, AlertSeverity.WARNING, Quantity.RX_POWER, NEAR, WindowSource.PMD_TABLE
    )
    assert type(near.kind) is AlertKind and type(near.window_source) is WindowSource
    assert (dark.condition, dark.severity) == (Condition.DARK, AlertSeverity.CRITICAL)
    assert life.state.tracks[KEY].condition is NEAR
    # Written again it is the same document: the words did not change.
    # Written back unchanged, except the old word for the standard's edges ("pmd-table"),
    # which is now written "standard".
    expected = json.loads(UNTYPED_SNAPSHOT.read_text().replace('"pmd-table"', '"standard"'))
    assert life.snapshot() == expected
    # It carries on from there: sfp7 still near overload continues with sequence 3 ...
    (update,) = life.observe(rx_assessment(-1.5, NEAR, T0 + 180), T0 + 180)
    assert (update.kind, update.key, update.sequence) == (AlertKind.UPDATE, KEY, 3)
    # ... and sfp9, absent from the replies, resolves after the gone hold (300 s default),
    # its summary built from the restored quantity and condition.
    (gone,) = life.observe(rx_assessment(-1.5, NEAR, T0 + 480), T0 + 480)
    assert (gone.kind, gone.sequence, gone.ends_at) == (AlertKind.RESOLVE, 3, T0 + 180)
    assert gone.summary == "sfp9 lane 1: no longer reported by hgl-core-1 (was dark)"
