"""Module status flags feed conditions: TX_FAULT, RX_LOS, latched alarms, CMIS state.

Flag positions are the decoders' (SFF-8472 A2h byte 110 bit 2 TX_FAULT, bit 1 RX_LOS;
bytes 112-117 alarm/warning flags; SFF-8636 bytes 3-14 latched flags; CMIS lower page
byte 3 module state, page 11h latched lane flags), each checked against the standard in
tests/unit/collector; here maps are encoded by the lab's encoder, decoded by ours, and
judged.
"""

from __future__ import annotations

from lightwarden.collector.map_facts import apply_to_identity, facts_from_map
from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity, Thresholds
from lightwarden.fixtures.lab.encode import encode_cmis, encode_sff8472
from lightwarden.rules.assess import assess
from lightwarden.rules.findings import Condition, Severity

RX, TX, BIAS, TEMP = (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS,
                      Quantity.TEMPERATURE)


def _judge(data: bytes, rows: list[tuple[int, Quantity, float | None]], lanes: int = 1):
    identity = OpticIdentity(device="qm-edge-c", port="sfp9", admin_up=True, lanes=lanes)
    apply_to_identity(identity, facts_from_map(data))
    b = BatchBuilder("qm-edge-c")
    o = b.add_optic(identity)
    for lane, q, v in rows:
        b.add(o, lane, q, v)
    a = assess(b.build(0.0))
    return [Condition(int(c)) for c in a.condition], a


def test_tx_fault_flag_is_a_transmitter_fault_on_that_lane():
    data = encode_sff8472(tx_fault=True, rx_power_dbm=-5.0, tx_power_dbm=-2.0)
    conds, a = _judge(data, [(1, TX, -2.0), (1, RX, -5.0)])
    assert conds == [Condition.TX_FAULT, Condition.HEALTHY]
    assert "TX_FAULT" in a.notes[0]
    assert Condition.TX_FAULT.severity is Severity.CRITICAL


def test_rx_los_flag_on_a_receiver_that_reads_light_is_loss_of_signal():
    data = encode_sff8472(flags={("rx_los", 1)}, rx_power_dbm=-5.0)
    conds, _ = _judge(data, [(1, RX, -5.0)])
    assert conds == [Condition.LOSS_OF_SIGNAL]


def test_a_latched_alarm_marks_a_reading_back_inside_its_levels():
    t = {"rx_power": Thresholds(high_alarm=2.0, low_alarm=-18.0, high_warning=0.0,
                                low_warning=-15.0)}
    data = encode_sff8472(flags={("rx_power_low_alarm", 1)}, rx_power_dbm=-5.0, thresholds=t)
    conds, a = _judge(data, [(1, RX, -5.0)])
    assert conds == [Condition.LATCHED_ALARM]
    assert "latched its rx power low alarm flag" in a.notes[0]


def test_a_latched_flag_never_softens_a_worse_judgement():
    data = encode_sff8472(flags={("rx_power_low_warning", 1)}, rx_power_dbm=-25.0,
                          thresholds={"rx_power": Thresholds(high_alarm=2.0, low_alarm=-18.0,
                                                             low_warning=-15.0)})
    conds, _ = _judge(data, [(1, RX, -25.0)])
    assert conds == [Condition.BELOW_SENSITIVITY]


def test_cmis_module_not_ready():
    data = encode_cmis(module_state="low_power")
    conds, a = _judge(data, [(0, TEMP, 40.0), (1, RX, -2.0)], lanes=4)
    assert conds[0] is Condition.NOT_READY
    assert "low_power" in a.notes[0]


def test_cmis_tx_fault_on_one_lane_only():
    data = encode_cmis(tx_fault_lanes=[3])
    conds, _ = _judge(data, [(n, TX, 1.0) for n in (1, 2, 3, 4)], lanes=4)
    assert conds == [Condition.HEALTHY, Condition.HEALTHY, Condition.TX_FAULT,
                     Condition.HEALTHY]


def test_flags_follow_a_reread_map():
    identity = OpticIdentity(device="qm-edge-c", port="sfp9")
    apply_to_identity(identity, facts_from_map(encode_sff8472(tx_fault=True)))
    assert ("tx_fault", 1) in identity.flags
    apply_to_identity(identity, facts_from_map(encode_sff8472()))
    assert ("tx_fault", 1) not in identity.flags


def test_a_flagged_fault_with_the_laser_shut_down_is_a_fault_not_a_switched_off_laser():
    # The module flags TX_FAULT and has shut its laser: Tx no light, bias 0 mA. The flag
    # says why; the zero bias row is explained by it and raises nothing of its own.
    from lightwarden.collector.readings import ReadingStatus
    from lightwarden.rules.assess import LASER_OFF_NOTE
    from lightwarden.rules.findings import alert_key

    identity = OpticIdentity(device="qm-edge-c", port="sfp9", admin_up=True)
    apply_to_identity(identity, facts_from_map(encode_sff8472(tx_fault=True)))
    b = BatchBuilder("qm-edge-c")
    o = b.add_optic(identity)
    b.add(o, 1, TX, None, ReadingStatus.NO_LIGHT, "no light")
    b.add(o, 1, BIAS, 0.0)
    a = assess(b.build(0.0))
    assert [Condition(int(c)) for c in a.condition] == [Condition.TX_FAULT] * 2
    assert a.cause == {1: alert_key("qm-edge-c", "sfp9", 1, TX)}
    assert LASER_OFF_NOTE not in a.notes.get(0, "") and "TX_FAULT" in a.notes[0]
