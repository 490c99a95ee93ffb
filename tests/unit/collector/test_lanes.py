"""Lane numbers from any base, totals told from lanes, duplicates made visible.

The arithmetic of a total: N equal lanes carry N times one lane's power, +10 log10 N dB
(dB arithmetic, standards.md "Units and conversions"; 4 lanes: +6.02 dB).
"""

from __future__ import annotations

import math

import pytest

from lightwarden.collector.readings import (
    BatchBuilder,
    OpticIdentity,
    Quantity,
    Thresholds,
)
from lightwarden.collector.sensors import LANE_TOTAL, OTHER, WATTS, classify_sensor
from lightwarden.collector.snmp.inventory import OpticSpec, SensorSpec, _number_lanes, lane_map
from lightwarden.rules.assess import assess
from lightwarden.rules.findings import Condition

RX, TX, BIAS = Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS


@pytest.mark.parametrize(("raw", "expected"), [
    ([1, 2, 3, 4], {1: 1, 2: 2, 3: 3, 4: 4}),
    ([0, 1, 2, 3], {0: 1, 1: 2, 2: 3, 3: 4}),  # numbered from 0
    ([5, 6, 7, 8], {5: 1, 6: 2, 7: 3, 8: 4}),  # a contiguous block from another base
    ([1, 3, 4], {1: 1, 3: 3, 4: 4}),  # a missing sensor does not shift the others
    ([0, 2], {0: 1, 2: 3}),
    ([], {}),
])
def test_lane_map(raw, expected):
    assert lane_map(raw) == expected


def test_names_give_raw_lanes_and_totals():
    assert classify_sensor("sfp7 Rx Power Lane 0", WATTS, "", port_name="sfp7") == (RX, 0)
    assert classify_sensor("qsfp1 Rx Power Total", WATTS, "", port_name="qsfp1") == (
        RX, LANE_TOTAL)
    assert classify_sensor("qsfp1 Total Tx Power", OTHER, "dBm", port_name="qsfp1") == (
        TX, LANE_TOTAL)
    # only ASCII digits are lane numbers
    assert classify_sensor("sfp7 Rx Power Lane \u00b2", WATTS, "", port_name="sfp7") == (RX, 1)


def _spec(*sensors: tuple[int, Quantity, int]) -> OpticSpec:
    spec = OpticSpec(OpticIdentity(device="qm-edge-c", port="qsfp3"))
    for ent, q, lane in sensors:
        spec.sensors.append(SensorSpec(ent, q, lane, None, None, None, ""))
    return spec


def test_lanes_numbered_from_zero_keep_all_four():
    # Before: "lane 0" and "lane 1" both became lane 1 and one was dropped.
    spec = _spec(*[(100 + n, RX, n) for n in range(4)], *[(200 + n, TX, n) for n in range(4)])
    _number_lanes(spec)
    assert sorted((s.quantity, s.lane) for s in spec.sensors) == sorted(
        [(RX, n) for n in (1, 2, 3, 4)] + [(TX, n) for n in (1, 2, 3, 4)])
    assert spec.identity.lanes == 4 and spec.identity.problems == []


def test_a_duplicate_lane_is_a_device_problem_not_a_silent_drop():
    spec = _spec((101, RX, 1), (102, RX, 1), (103, TX, 1))
    _number_lanes(spec)
    assert [(s.ent_index, s.lane) for s in spec.sensors if s.quantity is RX] == [(101, 1)]
    (problem,) = spec.identity.problems
    assert "rx_power lane 1" in problem and "101" in problem and "102" in problem


def test_a_total_sensor_is_lane_zero_and_judged_against_the_lanes_sum():
    spec = _spec((100, RX, LANE_TOTAL), (101, RX, 1), (102, RX, 2), (103, RX, 3), (104, RX, 4))
    _number_lanes(spec)
    assert sorted(s.lane for s in spec.sensors) == [0, 1, 2, 3, 4]
    # 100GBASE-LR4: Rx overload +4.5 dBm, min average receive power per lane -10.6 dBm
    # (IEEE 802.3 cl.88 Table 88-8 via standards.md, from memory): a total of four lanes
    # at -1.0 dBm each is +5.0 dBm, over the per-lane overload but well inside the
    # total's edges (+10.5 / -4.6 dBm).
    b = BatchBuilder("qm-edge-c")
    o = b.add_optic(OpticIdentity(device="qm-edge-c", port="qsfp3", pmd="100GBASE-LR4",
                                  lanes=4, admin_up=True))
    b.add(o, 0, RX, -1.0 + 10 * math.log10(4))
    b.add(o, 1, RX, -1.0)
    a = assess(b.build(0.0))
    shift = 10 * math.log10(4)
    assert shift == pytest.approx(6.02, abs=0.005)
    assert a.high_edge[0] == pytest.approx(a.high_edge[1] + shift)
    assert a.low_edge[0] == pytest.approx(a.low_edge[1] + shift)
    assert [Condition(int(c)) for c in a.condition] == [Condition.HEALTHY, Condition.HEALTHY]
    assert "total power of 4 lanes" in a.notes[0]


def test_total_rows_keep_module_levels_shifted_too():
    b = BatchBuilder("qm-edge-c")
    o = b.add_optic(OpticIdentity(device="qm-edge-c", port="qsfp3", pmd="", lanes=4,
                                  admin_up=True,
                                  thresholds={RX: Thresholds(high_alarm=3.0, low_alarm=-12.0)}))
    b.add(o, 0, RX, 5.0)  # four lanes at about -1 dBm
    a = assess(b.build(0.0))
    assert a.high_alarm is not None
    assert a.high_alarm[0] == pytest.approx(3.0 + 10 * math.log10(4))
    assert Condition(int(a.condition[0])) is Condition.HEALTHY
