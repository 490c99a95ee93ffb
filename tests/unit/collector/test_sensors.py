"""RFC 3433 sensor decoding and sensor-name classification."""

from __future__ import annotations

import math

import pytest

from lightwarden.collector.readings import Quantity, ReadingStatus
from lightwarden.collector.sensors import (
    AMPERES,
    CELSIUS,
    OTHER,
    VOLTS_DC,
    WATTS,
    classify_sensor,
    scale_exponent,
    sensor_value,
)

# EntitySensorDataScale codes (RFC 3433, verified from the MIB text via standards.md)
MICRO, MILLI, UNITS, KILO = 7, 8, 9, 10


def test_rfc3433_worked_example():
    # source: standards.md / RFC 3433 example (verified from the MIB text):
    # watts, micro, precision 1, value 8000 -> 800.0 uW -> -0.97 dBm
    value, status, note = sensor_value(WATTS, MICRO, 1, 8000, "")
    assert status is ReadingStatus.OK and note == ""
    assert value == pytest.approx(-0.969, abs=0.0005)
    assert round(value, 2) == -0.97


@pytest.mark.parametrize(
    ("code", "exponent"),
    # source: standards.md / RFC 3433 EntitySensorDataScale, exponent = (code - 9) x 3 (verified)
    [(1, -24), (7, -6), (8, -3), (9, 0), (10, 3), (17, 24)],
)
def test_scale_code_arithmetic(code, exponent):
    assert scale_exponent(code) == exponent


@pytest.mark.parametrize("code", [0, 18, -1])
def test_scale_code_out_of_range(code):
    with pytest.raises(ValueError):
        scale_exponent(code)
    _, status, note = sensor_value(WATTS, code, 0, 5, "")
    assert status is ReadingStatus.INVALID and "scale" in note


@pytest.mark.parametrize(
    ("microwatts_x10", "dbm"),
    # source: standards.md / Units and conversions (computed, textbook dBm definition)
    [(5000, -3.010), (1000, -10.000), (20000, 3.010), (363, -14.40), (1514, -8.20)],
)
def test_watts_micro_to_dbm(microwatts_x10, dbm):
    # 0.5 mW, 0.1 mW, 2 mW, 36.3 uW, 151.4 uW as value in 0.1 uW (contract encoding (a))
    value, status, _ = sensor_value(WATTS, MICRO, 1, microwatts_x10, "")
    assert status is ReadingStatus.OK
    assert value == pytest.approx(dbm, abs=0.006)


def test_watts_milli_precision_three():
    # 36.31 uW = 0.03631 mW: milli scale, precision 3 -> value 36 would lose digits, so
    # precision 5: 3631 x 10^-3 x 10^-5 W = 36.31 uW -> -14.40 dBm
    # source: standards.md / Units and conversions (computed)
    value, status, _ = sensor_value(WATTS, MILLI, 5, 3631, "")
    assert status is ReadingStatus.OK
    assert value == pytest.approx(-14.40, abs=0.005)


@pytest.mark.parametrize(
    ("raw", "dbm"),
    # contract encoding (b): other(1) + "dBm", units, precision 2; values from standards.md
    [(-301, -3.01), (-1000, -10.0), (301, 3.01), (-1440, -14.40), (-820, -8.20), (-3999, -39.99)],
)
def test_other_type_with_dbm_display(raw, dbm):
    value, status, _ = sensor_value(OTHER, UNITS, 2, raw, "dBm")
    assert status is ReadingStatus.OK
    assert value == pytest.approx(dbm, abs=1e-9)


@pytest.mark.parametrize("raw", [-4000, -4500])
def test_dbm_floor_is_no_light(raw):
    # contract: -40.00 dBm floor means a dark receiver
    value, status, note = sensor_value(OTHER, UNITS, 2, raw, " DBM ")
    assert value is None and status is ReadingStatus.NO_LIGHT and "no light" in note


def test_zero_watts_is_no_light():
    # source: standards.md / "no light": a power reading of 0 has no dBm value (practice)
    value, status, note = sensor_value(WATTS, MICRO, 1, 0, "")
    assert value is None and status is ReadingStatus.NO_LIGHT and "no light" in note


def test_negative_watts_is_invalid():
    value, status, _ = sensor_value(WATTS, MICRO, 1, -5, "")
    assert value is None and status is ReadingStatus.INVALID


@pytest.mark.parametrize(
    ("args", "expected"),
    [
        # contract: bias amperes, micro, precision 0 (uA) -> mA; SFF-8472 bias 12.000 mA example
        ((AMPERES, MICRO, 0, 12000, ""), 12.0),
        # contract: temperature celsius, units, precision 1; 26.5 C (standards.md SFF-8472 decode)
        ((CELSIUS, UNITS, 1, 265, ""), 26.5),
        ((CELSIUS, UNITS, 1, -400, ""), -40.0),
        # contract: supply voltsDC, milli, precision 0 (mV) -> V; 3.3000 V (standards.md)
        ((VOLTS_DC, MILLI, 0, 3300, ""), 3.3),
        # amperes milli precision 3 -> value 12345 = 12.345 mA
        ((AMPERES, MILLI, 3, 12345, ""), 0.012345 * 1000),
        # kilo scale just to exercise positive exponents: 2 kV (nonsense for an optic, but maths)
        ((VOLTS_DC, KILO, 0, 2, ""), 2000.0),
    ],
)
def test_other_quantities(args, expected):
    value, status, _ = sensor_value(*args)
    assert status is ReadingStatus.OK
    assert value == pytest.approx(expected, rel=1e-12)


def test_negative_precision_is_not_fixed_point():
    # RFC 3433: precision -8..-1 gives accurate digits, not decimal places
    value, status, _ = sensor_value(CELSIUS, UNITS, -2, 31, "")
    assert status is ReadingStatus.OK and value == 31.0


@pytest.mark.parametrize("raw", [1_000_000_000, -1_000_000_000, 2_000_000_000])
def test_overflow_and_underflow_are_invalid(raw):
    # source: standards.md / RFC 3433 value: +-1000000000 mean overflow/underflow (verified)
    value, status, note = sensor_value(WATTS, MICRO, 1, raw, "")
    assert value is None and status is ReadingStatus.INVALID
    assert "flow" in note


def test_just_below_overflow_is_a_number():
    value, status, _ = sensor_value(CELSIUS, UNITS, 1, 999_999_999, "")
    assert status is ReadingStatus.OK and value == pytest.approx(99_999_999.9)


@pytest.mark.parametrize("oper_status", [2, 3, 7])
def test_status_not_ok_is_unavailable(oper_status):
    # source: RFC 3433 EntitySensorStatus ok(1), unavailable(2), nonoperational(3) (verified);
    # the value column is still present (often 0) and must not become "no light"
    value, status, note = sensor_value(WATTS, MICRO, 1, 0, "", oper_status)
    assert value is None and status is ReadingStatus.UNAVAILABLE
    assert note.startswith("sensor reports")


@pytest.mark.parametrize(
    ("args", "column"),
    [
        ((WATTS, MICRO, 1, b"-7.91", ""), "value"),
        ((WATTS, MICRO, 1, "-7.91", ""), "value"),
        ((WATTS, MICRO, 1, None, ""), "value"),
        ((b"watts", MICRO, 1, 10, ""), "type"),
        ((WATTS, "micro", 1, 10, ""), "scale"),
        ((WATTS, MICRO, 1.5, 10, ""), "precision"),
        ((WATTS, MICRO, 1, True, ""), "value"),
    ],
)
def test_garbage_where_an_integer_belongs_is_invalid(args, column):
    value, status, note = sensor_value(*args)
    assert value is None and status is ReadingStatus.INVALID
    assert f"sensor {column} is not an integer" in note


def test_garbage_status_is_invalid():
    _, status, note = sensor_value(WATTS, MICRO, 1, 10, "", b"ok")
    assert status is ReadingStatus.INVALID and "status" in note


def test_unknown_type_uses_units_display_else_unsupported():
    # private type 200 with "dBm" display: decoded as dBm
    value, status, _ = sensor_value(200, UNITS, 1, -52, "dBm")
    assert status is ReadingStatus.OK and value == pytest.approx(-5.2)
    value, status, _ = sensor_value(200, MILLI, 0, 3300, "V")
    assert status is ReadingStatus.OK and value == pytest.approx(3.3)
    value, status, note = sensor_value(200, UNITS, 0, 5, "furlongs")
    assert value is None and status is ReadingStatus.UNSUPPORTED and "200" in note
    # RFC types we do not map (rpm 10) are unsupported too
    _, status, _ = sensor_value(10, UNITS, 0, 5000, "")
    assert status is ReadingStatus.UNSUPPORTED


def test_values_are_finite_floats():
    for raw in range(1, 70000, 997):
        value, status, _ = sensor_value(WATTS, MICRO, 1, raw, "")
        assert status is ReadingStatus.OK and math.isfinite(value)
        # round trip: 10^(dBm/10) mW back to 0.1 uW units (textbook dBm definition)
        assert 10 ** (value / 10) * 10_000 == pytest.approx(raw, rel=1e-9)


# --- names (contract: entPhysicalName identifies quantity and lane) -------------------


@pytest.mark.parametrize(
    ("name", "sensor_type", "display", "expected"),
    [
        ("sfp7 Rx Power Lane 3", WATTS, "", (Quantity.RX_POWER, 3)),
        ("sfp7 Tx Power Lane 2", OTHER, "dBm", (Quantity.TX_POWER, 2)),
        ("sfp7 Rx Power", WATTS, "", (Quantity.RX_POWER, 1)),
        ("eth1/7 RECEIVE power lane 4", WATTS, "", (Quantity.RX_POWER, 4)),
        ("sfp7 Transmit Power", WATTS, "", (Quantity.TX_POWER, 1)),
        ("sfp7 Bias Lane 2", AMPERES, "", (Quantity.BIAS, 2)),
        ("sfp7 Tx Bias Lane 2", AMPERES, "", (Quantity.BIAS, 2)),
        ("sfp7 Temperature", CELSIUS, "", (Quantity.TEMPERATURE, 0)),
        ("sfp7 Temp", OTHER, "C", (Quantity.TEMPERATURE, 0)),
        ("sfp7 Supply Voltage", VOLTS_DC, "", (Quantity.SUPPLY, 0)),
        ("sfp7 Vcc", OTHER, "V", (Quantity.SUPPLY, 0)),
        # type alone decides temperature, supply and bias
        ("sfp7 sensor 4", CELSIUS, "", (Quantity.TEMPERATURE, 0)),
        ("sfp7 sensor 5", VOLTS_DC, "", (Quantity.SUPPLY, 0)),
        ("sfp7 sensor 6 lane 3", AMPERES, "", (Quantity.BIAS, 3)),
        # power without a direction is not classifiable
        ("sfp7 Power Lane 1", WATTS, "", None),
        # a watts sensor named "temperature" contradicts itself
        ("sfp7 Temperature", WATTS, "", None),
        ("Fan 2", 10, "", None),
    ],
)
def test_classify_sensor(name, sensor_type, display, expected):
    assert classify_sensor(name, sensor_type, display, port_name="sfp7") == expected


def test_classify_strips_port_name():
    # a port literally named "rx-trunk" must not make its Tx sensor a receive sensor
    assert classify_sensor("rx-trunk Tx Power Lane 1", WATTS, "", port_name="rx-trunk") == (
        Quantity.TX_POWER,
        1,
    )
