"""SFF-8472 decoder and encoder against the worked decodes in standards.md."""

from __future__ import annotations

import math
import struct
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lightwarden.collector.eeprom import Flag, decode, load
from lightwarden.collector.readings import Quantity, Thresholds
from lightwarden.fixtures.lab.encode import ExternalCalibration, encode_sff8472

DATA = Path(__file__).parent / "data" / "eeprom"
A2 = 256


def _with_realtime(temp=0x1A80, vcc=0x80E8, bias=0x1770, tx=0x2710, rx=0x1F40) -> bytes:
    """The internal-calibration vector with other raw real-time values (checksum kept)."""
    m = bytearray(load(DATA / "sff8472_internal.hex"))
    struct.pack_into(">hHHHH", m, A2 + 96, temp, vcc, bias, tx, rx)
    return bytes(m)


def test_vector_identity():
    m = decode(load(DATA / "sff8472_internal.hex"))
    assert m.problems == []
    assert m.spec == "SFF-8472"
    assert (m.identifier, m.identifier_name) == (0x03, "SFP/SFP+/SFP28")
    # source: standards.md, SFF-8472 A0h byte 3 b5 = 10GBASE-LR (verified)
    assert m.pmd == "10GBASE-LR"
    # source: standards.md, SFF-8472 A0h bytes 60-61 wavelength in nm (unit: memory)
    assert m.wavelength_nm == 1310.0
    assert m.vendor_name == "QUILLMOOR LAB"
    assert m.part_number == "HG-SFP-LR-01"
    assert m.serial == "HGL0001"
    # source: standards.md, A0h byte 92 b5 internal / b3 average (verified)
    assert m.calibration == "internal"
    assert m.rx_power_type == "average"
    assert m.form_factor == "SFP+"
    assert {k: c.ok for k, c in m.checksums.items()} == {
        "CC_BASE": True,
        "CC_EXT": True,
        "CC_DMI": True,
    }


def test_vector_monitors_and_flags():
    m = decode(load(DATA / "sff8472_internal.hex"))
    lane = m.lanes[0]
    # source: standards.md, SFF-8472 worked decode: Rx 0x1F40 -> -0.969 dBm (verified)
    assert lane.rx_power_dbm == pytest.approx(-0.969, abs=5e-4)
    # source: standards.md, SFF-8472 worked decode: Tx 0x2710 -> 0.000 dBm (verified)
    assert lane.tx_power_dbm == pytest.approx(0.0, abs=1e-9)
    # source: standards.md, SFF-8472 worked decode: bias 0x1770 -> 12.000 mA (verified)
    assert lane.bias_ma == pytest.approx(12.0)
    # source: standards.md, SFF-8472 worked decodes: temperature 0x1A80 -> 26.5 C,
    # Vcc 0x80E8 -> 3.3000 V (verified)
    assert m.temperature_c == pytest.approx(26.5)
    assert m.supply_v == pytest.approx(3.3)
    # source: standards.md, A2h byte 110 b1 RX_LOS, byte 113 b6 Rx power low alarm (verified)
    assert m.flag_set("rx_los", 1)
    assert m.flag_set("rx_power_low_alarm", 1)
    assert not m.flag_set("tx_fault", 1)


def test_vector_thresholds():
    m = decode(load(DATA / "sff8472_internal.hex"))
    rx = m.thresholds[Quantity.RX_POWER]
    # source: standards.md, threshold order HA, LA, HW, LW at A2h 32-39 and the worked
    # power decodes 0x1F40 / 0x0001 / 0x2710 / 0x0C35 (verified)
    assert rx.high_alarm == pytest.approx(-0.969, abs=5e-4)
    assert rx.low_alarm == pytest.approx(-40.0)
    assert rx.high_warning == pytest.approx(0.0, abs=1e-9)
    assert rx.low_warning == pytest.approx(-5.051, abs=5e-4)
    t = m.thresholds[Quantity.TEMPERATURE]
    assert (t.high_alarm, t.low_alarm, t.high_warning, t.low_warning) == (75.0, -5.0, 70.0, 0.0)
    assert Quantity.BIAS not in m.thresholds  # all-zero block: not declared


@pytest.mark.parametrize(
    ("raw", "celsius"),
    [(0x1A80, 26.5), (0xFF80, -0.5), (0xF600, -10.0), (0xD800, -40.0)],
    ids=["0x1A80", "0xFF80", "0xF600", "0xD800"],
)
def test_temperature_worked_decodes(raw, celsius):
    # source: standards.md, SFF-8472 worked decode: temperature (verified)
    signed = struct.unpack(">h", raw.to_bytes(2, "big"))[0]
    m = decode(_with_realtime(temp=signed))
    assert m.temperature_c == pytest.approx(celsius)


@pytest.mark.parametrize(
    ("field", "raw", "dbm"),
    [
        ("rx", 0x0001, -40.0),  # source: standards.md, Rx 0x0001 -> -40.00 dBm (verified)
        ("rx", 0xFFFF, 8.165),  # source: standards.md, Rx 0xFFFF -> +8.165 dBm (verified)
        ("tx", 0x0C35, -5.051),  # source: standards.md, Tx 0x0C35 -> -5.051 dBm (verified)
    ],
)
def test_power_worked_decodes(field, raw, dbm):
    m = decode(_with_realtime(**{field: raw}))
    value = m.lanes[0].rx_power_dbm if field == "rx" else m.lanes[0].tx_power_dbm
    assert value == pytest.approx(dbm, abs=5e-4)


def test_zero_rx_power_is_no_light():
    # source: standards.md, "no light": a power reading of 0 has no dBm value (practice)
    m = decode(_with_realtime(rx=0))
    assert m.lanes[0].rx_power_dbm is None
    assert m.lanes[0].rx_no_light is True


def test_external_calibration_vector():
    m = decode(load(DATA / "sff8472_external.hex"))
    assert m.problems == []
    assert m.calibration == "external"
    lane = m.lanes[0]
    # source: standards.md, external-cal Tx power: raw 3000, slope 1.5, offset -200
    # -> 430 uW = -3.665 dBm (verified)
    assert lane.tx_power_dbm == pytest.approx(-3.665, abs=5e-4)
    # source: standards.md, external-cal bias: raw 5000, slope 2.0 -> 20.0 mA (verified)
    assert lane.bias_ma == pytest.approx(20.0)
    # source: standards.md, external-cal Rx power: ADC 4000, Rx2 1e-5, Rx1 0.9, Rx0 5.0
    # -> 376.5 uW = -4.242 dBm (verified; polynomial form from memory). The stored
    # IEEE-754 singles are not exactly 1e-5 and 0.9, hence the tolerance.
    assert lane.rx_power_dbm == pytest.approx(-4.242, abs=1e-3)
    assert m.temperature_c == pytest.approx(26.5)


def test_float_constant_bytes():
    # source: standards.md, "float constant 1.0 = bytes 3F 80 00 00" (verified): the
    # encoder's default Rx_PWR(1) = 1.0 lands at A2h 68-71 big-endian.
    data = encode_sff8472(calibration="external", external=ExternalCalibration())
    assert data[A2 + 68 : A2 + 72] == bytes.fromhex("3F800000")


def test_checksum_example_and_bad_checksum():
    data = bytearray(load(DATA / "sff8472_checksum.hex"))
    m = decode(bytes(data))
    # source: standards.md, checksum: bytes 03 04 07 then 60 x 00 -> CC_BASE 0x0E (verified)
    assert m.checksums["CC_BASE"].expected == 0x0E
    assert m.checksums["CC_BASE"].ok
    data[63] = 0x0F
    m = decode(bytes(data))
    assert not m.checksums["CC_BASE"].ok
    assert "bad checksum CC_BASE: expected 0x0E found 0x0F" in m.problems
    assert "diagnostics not implemented (A0h byte 92 bit 6 clear)" in m.problems


def test_truncated_a2():
    data = load(DATA / "sff8472_internal.hex")[:256]
    m = decode(data)
    assert "truncated: page A2h missing" in m.problems
    assert m.pmd == "10GBASE-LR"  # identity survives
    assert m.lanes == []


@pytest.mark.parametrize("which", ["CC_BASE", "CC_EXT", "CC_DMI"])
def test_encoder_bad_checksum(which):
    m = decode(encode_sff8472(bad_checksum=which))
    assert [k for k, c in m.checksums.items() if not c.ok] == [which]
    assert any(p.startswith(f"bad checksum {which}") for p in m.problems)


# Round trip: chosen values -> encoder -> decoder, within one register step.
_dbm = st.floats(min_value=-40.0, max_value=8.16)


def _close_power(decoded: float | None, chosen: float) -> bool:
    # One LSB is 0.1 uW = 1e-4 mW; rounding gives at most half of that.
    return decoded is not None and abs(10 ** (decoded / 10) - 10 ** (chosen / 10)) <= 1e-4


@settings(max_examples=200, deadline=None)
@given(
    rx=_dbm,
    tx=_dbm,
    bias=st.floats(min_value=0.0, max_value=131.0),
    temp=st.floats(min_value=-127.0, max_value=127.0),
    vcc=st.floats(min_value=0.0, max_value=6.5),
    rx_type=st.sampled_from(["average", "oma"]),
)
def test_round_trip_internal(rx, tx, bias, temp, vcc, rx_type):
    th = {Quantity.RX_POWER: Thresholds(rx, rx - 1, rx - 0.5, rx - 0.75)}
    m = decode(
        encode_sff8472(
            rx_power_dbm=rx, tx_power_dbm=tx, bias_ma=bias, temperature_c=temp,
            supply_v=vcc, rx_power_type=rx_type, thresholds=th,
        )
    )
    assert m.problems == []
    lane = m.lanes[0]
    assert _close_power(lane.rx_power_dbm, rx)
    assert _close_power(lane.tx_power_dbm, tx)
    assert abs(lane.bias_ma - bias) <= 0.001 + 1e-9  # half the 2 uA LSB, plus float slack
    assert abs(m.temperature_c - temp) <= 1 / 512
    assert abs(m.supply_v - vcc) <= 50e-6
    assert m.rx_power_type == rx_type
    got = m.thresholds[Quantity.RX_POWER]
    assert _close_power(got.high_alarm, rx)
    assert _close_power(got.low_alarm, rx - 1)


@settings(max_examples=100, deadline=None)
@given(
    rx=st.floats(min_value=-30.0, max_value=3.0),
    tx=st.floats(min_value=-10.0, max_value=3.0),  # above the largest offset (200 units)
    bias=st.floats(min_value=1.0, max_value=60.0),
    tx_slope=st.sampled_from([0.75, 1.0, 1.5, 2.0]),
    tx_offset=st.integers(min_value=-200, max_value=200),
    rx1=st.floats(min_value=0.5, max_value=2.0),
    rx0=st.floats(min_value=0.0, max_value=10.0),
)
def test_round_trip_external(rx, tx, bias, tx_slope, tx_offset, rx1, rx0):
    ext = ExternalCalibration(
        rx_poly=(0.0, 0.0, 0.0, rx1, rx0), bias=(2.0, 0), tx_power=(tx_slope, tx_offset)
    )
    m = decode(
        encode_sff8472(
            calibration="external", external=ext, rx_power_dbm=rx, tx_power_dbm=tx, bias_ma=bias
        )
    )
    assert m.problems == []
    lane = m.lanes[0]
    # One ADC step moves the result by the slope (Rx: by Rx_PWR(1)) in 0.1 uW units.
    assert abs(10 ** (lane.rx_power_dbm / 10) - 10 ** (rx / 10)) <= rx1 * 1e-4
    assert abs(10 ** (lane.tx_power_dbm / 10) - 10 ** (tx / 10)) <= tx_slope * 1e-4
    assert abs(lane.bias_ma - bias) <= 2.0 * 0.002
    assert math.isfinite(m.temperature_c)


def test_derived_flags_match_values():
    th = {
        Quantity.RX_POWER: Thresholds(0.5, -14.4, -1.0, -12.0),
        Quantity.TEMPERATURE: Thresholds(75.0, -5.0, 70.0, 0.0),
    }
    m = decode(encode_sff8472(rx_power_dbm=-13.0, temperature_c=72.0, thresholds=th))
    assert set(m.flags) == {Flag("rx_power_low_warning", 1), Flag("temperature_high_warning", 0)}
    dark = decode(encode_sff8472(rx_power_dbm=None, thresholds=th))
    assert dark.lanes[0].rx_no_light
    assert dark.flag_set("rx_los", 1) and dark.flag_set("rx_power_low_alarm", 1)
