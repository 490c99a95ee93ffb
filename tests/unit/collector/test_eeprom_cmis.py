"""CMIS decoder and encoder against standards.md offsets (units from memory)."""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lightwarden.collector.eeprom import Flag, decode, load
from lightwarden.collector.readings import Quantity, Thresholds
from lightwarden.fixtures.lab.encode import encode_cmis

DATA = Path(__file__).parent / "data" / "eeprom"


def test_vector():
    m = decode(load(DATA / "cmis_dr4.hex"))
    assert m.problems == []
    assert (m.spec, m.identifier, m.form_factor) == ("CMIS", 0x18, "QSFP-DD")
    # media interface 0x1C = 400GBASE-DR4 (SFF-8024, verified against a public restatement)
    assert (m.media_type, m.pmd) == ("smf", "400GBASE-DR4")
    # source: standards.md, CMIS lower page byte 3 bits 3-1: 3 = Ready (verified)
    assert m.module_state == "ready"
    # source: standards.md, CMIS temperature 14-15, Vcc 16-17 (verified) with the
    # SFF-8472 worked decodes 0xD800 -> -40.0 C and 0x80E8 -> 3.3 V (units from memory)
    assert m.temperature_c == pytest.approx(-40.0)
    assert m.supply_v == pytest.approx(3.3)
    assert (m.vendor_name, m.part_number, m.serial) == (
        "QUILLMOOR LAB",
        "HG-DD-DR4-01",
        "HGL0003",
    )
    assert m.link_lengths_m == {"smf": 500}
    assert m.wavelength_nm == pytest.approx(1311.0)
    assert m.rx_power_type == "average"
    assert set(m.checksums) == {"page 00h", "page 01h", "page 02h"}


def test_vector_lanes_and_bias_multiplier():
    m = decode(load(DATA / "cmis_dr4.hex"))
    assert len(m.lanes) == 4
    # source: standards.md, CMIS page 11h Rx power 186-201 (verified); 0x1F40 -> -0.969 dBm
    assert m.lanes[0].rx_power_dbm == pytest.approx(-0.969, abs=5e-4)
    assert m.lanes[1].rx_no_light and m.lanes[1].rx_power_dbm is None
    assert m.lanes[3].rx_power_dbm == pytest.approx(-40.0)
    assert m.lanes[2].tx_power_dbm == pytest.approx(-5.051, abs=5e-4)
    # source: standards.md, page 01h byte 160 bits 4-3 bias multiplier (verified):
    # 0x1770 x 2 uA x 2 = 24.0 mA
    assert [lane.bias_ma for lane in m.lanes] == pytest.approx([24.0] * 4)


def test_vector_thresholds_and_flags():
    m = decode(load(DATA / "cmis_dr4.hex"))
    # source: standards.md, CMIS page 02h Tx power 176-183, bias 184-191, Rx 192-199 (verified)
    assert m.thresholds[Quantity.TX_POWER].high_alarm == pytest.approx(8.165, abs=5e-4)
    assert m.thresholds[Quantity.RX_POWER].high_alarm == pytest.approx(-0.969, abs=5e-4)
    assert m.thresholds[Quantity.BIAS].high_alarm == pytest.approx(24.0)
    assert m.thresholds[Quantity.BIAS].high_warning == pytest.approx(20.0)
    # lower page byte 9 bit 0, page 11h byte 147 and 150 (public restatement of CMIS, verified)
    assert set(m.flags) == {
        Flag("temperature_high_alarm", 0),
        Flag("rx_los", 2),
        Flag("rx_power_low_alarm", 2),
    }


@pytest.mark.parametrize(
    ("state", "code"),
    [("low_power", 1), ("power_up", 2), ("ready", 3), ("power_down", 4), ("fault", 5)],
)
def test_module_states(state, code):
    # source: standards.md, CMIS module state codes (verified)
    data = encode_cmis(module_state=state)
    assert data[3] >> 1 & 7 == code
    m = decode(data)
    assert m.module_state == state
    assert (state == "fault") == any("fault state" in p for p in m.problems)


def test_truncated_pages():
    data = encode_cmis()
    m = decode(data[: 128 * 3])
    assert "truncated: pages 02h, 03h, 10h, 11h missing" in m.problems
    assert m.lanes == [] and m.thresholds == {}
    assert m.pmd == "400GBASE-DR4"
    m = decode(data[:100])
    assert m.problems == ["truncated: lower page incomplete (100 of 128 bytes)"]


def test_flat_memory_has_no_lanes():
    data = bytearray(encode_cmis()[:256])
    data[2] |= 0x80
    m = decode(bytes(data))
    assert m.problems == []
    assert m.lanes == [] and not m.diagnostics


@pytest.mark.parametrize("which", ["page 00h", "page 01h", "page 02h"])
def test_encoder_bad_checksum(which):
    m = decode(encode_cmis(bad_checksum=which))
    assert [k for k, c in m.checksums.items() if not c.ok] == [which]


_dbm = st.floats(min_value=-40.0, max_value=8.16)


@settings(max_examples=150, deadline=None)
@given(
    n=st.integers(min_value=1, max_value=8),
    data=st.data(),
    mult=st.sampled_from([1, 2, 4]),
    pmd=st.sampled_from(["400GBASE-DR4", "400GBASE-FR4", "100GBASE-SR4", "400GBASE-SR8"]),
)
def test_round_trip(n, data, mult, pmd):
    rx = data.draw(st.lists(st.one_of(st.none(), _dbm), min_size=n, max_size=n))
    tx = data.draw(st.lists(_dbm, min_size=n, max_size=n))
    bias = data.draw(st.lists(st.floats(0.0, 131.0 * mult), min_size=n, max_size=n))
    hi = data.draw(st.floats(1.0, 131.0 * mult))
    m = decode(
        encode_cmis(
            rx_power_dbm=rx, tx_power_dbm=tx, bias_ma=bias, bias_multiplier=mult, pmd=pmd,
            thresholds={Quantity.BIAS: Thresholds(hi, 0.0, hi, 0.0)},
        )
    )
    assert m.problems == []
    assert m.pmd == pmd
    assert len(m.lanes) == n
    lsb = 0.002 * mult
    for lane, r, t, b in zip(m.lanes, rx, tx, bias, strict=True):
        if r is None:
            assert lane.rx_no_light
        else:
            assert abs(10 ** (lane.rx_power_dbm / 10) - 10 ** (r / 10)) <= 1e-4
        assert abs(10 ** (lane.tx_power_dbm / 10) - 10 ** (t / 10)) <= 1e-4
        assert abs(lane.bias_ma - b) <= lsb / 2 + 1e-9
    assert abs(m.thresholds[Quantity.BIAS].high_alarm - hi) <= lsb / 2 + 1e-9
