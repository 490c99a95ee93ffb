"""SFF-8636 decoder and encoder against standards.md offsets and worked decodes."""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lightwarden.collector.eeprom import Flag, decode, load, parse_hexdump
from lightwarden.collector.readings import Quantity, Thresholds
from lightwarden.fixtures.lab.encode import encode_sff8636

DATA = Path(__file__).parent / "data" / "eeprom"


def test_vector_identity():
    m = decode(load(DATA / "sff8636_lr4.hex"))
    assert m.problems == []
    assert (m.spec, m.identifier, m.form_factor) == ("SFF-8636", 0x11, "QSFP28")
    # source: standards.md, SFF-8636 byte 192 extended compliance 0x03 = 100GBASE-LR4
    # (SFF-8024, verified)
    assert m.pmd == "100GBASE-LR4"
    # wavelength bytes 186-187 in 0.05 nm steps (from memory)
    assert m.wavelength_nm == 1310.0
    assert (m.vendor_name, m.part_number, m.serial) == (
        "QUILLMOOR LAB",
        "HG-Q28-LR4-01",
        "HGL0002",
    )
    # source: standards.md, SFF-8636 byte 220 b3 Rx power average (verified)
    assert m.rx_power_type == "average"
    assert all(c.ok for c in m.checksums.values())
    assert set(m.checksums) == {"CC_BASE", "CC_EXT"}


def test_vector_lanes():
    m = decode(load(DATA / "sff8636_lr4.hex"))
    # source: standards.md, SFF-8636 lower page Rx power 34-41, bias 42-49, Tx 50-57
    # (verified) with the SFF-8472 worked decodes ("units: as SFF-8472")
    rx = [lane.rx_power_dbm for lane in m.lanes]
    assert rx[0] == pytest.approx(-0.969, abs=5e-4)
    assert rx[1] is None and m.lanes[1].rx_no_light
    assert rx[2] == pytest.approx(-40.0)
    assert rx[3] == pytest.approx(8.165, abs=5e-4)
    assert m.lanes[1].tx_power_dbm == pytest.approx(-5.051, abs=5e-4)
    assert [lane.bias_ma for lane in m.lanes] == pytest.approx([12.0] * 4)
    # source: standards.md, temperature 0xF600 -> -10.0 C (verified)
    assert m.temperature_c == pytest.approx(-10.0)
    assert m.supply_v == pytest.approx(3.3)


def test_vector_flags_and_thresholds():
    m = decode(load(DATA / "sff8636_lr4.hex"))
    # Rx power flags byte 9: lane 2 in bits 3-0 (source: standards.md, verified);
    # byte 3 Rx LOS and byte 4 Tx fault: public restatement of SFF-8636 rev 2.7 (verified)
    assert set(m.flags) == {
        Flag("rx_los", 2),
        Flag("tx_fault", 4),
        Flag("rx_power_low_alarm", 2),
    }
    # source: standards.md, page 03h thresholds Rx power 176-183, bias 184-191 (verified)
    rx = m.thresholds[Quantity.RX_POWER]
    assert rx.high_alarm == pytest.approx(-0.969, abs=5e-4)
    assert rx.low_warning == pytest.approx(-5.051, abs=5e-4)
    assert m.thresholds[Quantity.BIAS].high_alarm == pytest.approx(12.0)
    assert m.thresholds[Quantity.BIAS].high_warning == pytest.approx(10.0)
    assert m.thresholds[Quantity.TEMPERATURE].low_alarm == pytest.approx(-5.0)
    assert Quantity.TX_POWER not in m.thresholds


def test_missing_pages_are_zero_filled_by_the_reader():
    # The vector file leaves out [page 01h] and [page 02h].
    data = load(DATA / "sff8636_lr4.hex")
    assert len(data) == 640
    assert data[256:512] == bytes(256)


def test_truncated_page03():
    data = load(DATA / "sff8636_lr4.hex")[:256]
    m = decode(data)
    assert "truncated: pages 01h, 02h, 03h missing" in m.problems
    assert m.thresholds == {}
    assert len(m.lanes) == 4  # the lower page still decodes
    m = decode(data + bytes(256))
    assert m.problems == ["truncated: page 03h missing"]


def test_identifier_mismatch_is_reported():
    data = bytearray(encode_sff8636())
    data[128] = 0x0D
    m = decode(bytes(data))
    assert any(p.startswith("identifier differs") for p in m.problems)


@pytest.mark.parametrize("which", ["CC_BASE", "CC_EXT"])
def test_encoder_bad_checksum(which):
    m = decode(encode_sff8636(bad_checksum=which))
    assert [k for k, c in m.checksums.items() if not c.ok] == [which]


@pytest.mark.parametrize(
    ("pmd", "identifier"),
    [("40GBASE-LR4", 0x0D), ("40GBASE-SR4", 0x0D), ("100GBASE-SR4", 0x11), ("10GBASE-LR", 0x0D)],
)
def test_pmd_codes_round_trip(pmd, identifier):
    # source: standards.md, byte 131 b1 40GBASE-LR4, b2 40GBASE-SR4, b5 10GBASE-LR;
    # byte 192 0x02 100GBASE-SR4 (verified)
    m = decode(encode_sff8636(pmd=pmd, identifier=identifier))
    assert m.pmd == pmd


_dbm = st.floats(min_value=-40.0, max_value=8.16)


@settings(max_examples=150, deadline=None)
@given(
    rx=st.lists(st.one_of(st.none(), _dbm), min_size=4, max_size=4),
    tx=st.lists(_dbm, min_size=4, max_size=4),
    bias=st.lists(st.floats(min_value=0.0, max_value=131.0), min_size=4, max_size=4),
    hw=_dbm,
)
def test_round_trip(rx, tx, bias, hw):
    th = {Quantity.TX_POWER: Thresholds(hw, None, hw, None)}
    m = decode(encode_sff8636(rx_power_dbm=rx, tx_power_dbm=tx, bias_ma=bias, thresholds=th))
    assert m.problems == []
    for lane, r, t, b in zip(m.lanes, rx, tx, bias, strict=True):
        if r is None:
            assert lane.rx_no_light and lane.rx_power_dbm is None
            assert Flag("rx_los", lane.lane) in m.flags
        else:
            assert abs(10 ** (lane.rx_power_dbm / 10) - 10 ** (r / 10)) <= 1e-4
        assert abs(10 ** (lane.tx_power_dbm / 10) - 10 ** (t / 10)) <= 1e-4
        assert abs(lane.bias_ma - b) <= 0.001 + 1e-9  # half the 2 uA LSB, plus float slack
    got = m.thresholds[Quantity.TX_POWER]
    assert abs(10 ** (got.high_alarm / 10) - 10 ** (hw / 10)) <= 1e-4
    assert got.low_alarm is None


def test_hexdump_offsets_in_upper_page_addresses():
    text = "[page lower]\n0000: 11\n" + "00 " * 127 + "\n[page 00h]\n0080: 11 00\n0082: 07\n"
    data = parse_hexdump(text)
    assert data[128:131] == bytes([0x11, 0x00, 0x07])
    m = decode(data)
    assert "truncated: page 00h incomplete (3 of 128 bytes)" in m.problems
