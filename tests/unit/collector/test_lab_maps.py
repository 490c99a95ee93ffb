"""The committed lab memory maps (fixtures/lab/maps/*.hex) through `lightwarden decode`.

Every file is decoded by the real CLI entry (``exporters.cli.main``; a few through a
subprocess of ``python -m lightwarden.exporters.app.cli``) and held against the lab part it
belongs to (lab.yaml) and the lab model's readings at the lab epoch.

Units and offsets: source: standards.md "SFF-8472" table (LSBs: temperature 1/256 C,
Vcc 100 uV, bias 2 uA, Tx/Rx power 0.1 uW; external calibration constants at A2h 56-91;
A0h byte 92 calibration and Rx power type bits; CC_BASE at A0h byte 63) (verified).
"""

from __future__ import annotations

import json
import math
import struct
import subprocess
import sys
from pathlib import Path

import pytest

from lightwarden.collector.eeprom import load
from lightwarden.exporters.app.cli import main
from lightwarden.fixtures.lab.make_maps import MAPS_DIR, stale_files
from lightwarden.fixtures.lab.maps import EXTERNAL_CALIBRATION, layout_of, map_file_name
from lightwarden.fixtures.lab.model import Lab, LabPort

LAB = Lab.load()
PORTS: dict[str, LabPort] = {map_file_name(p.device, p.name): p for p in LAB.optic_ports()}

# One register step (LSB) per quantity, in the units the JSON reports.
# source: standards.md SFF-8472 "LSB" rows (verified); SFF-8636 and CMIS use the same units.
POWER_LSB_MW = 1e-4
BIAS_LSB_MA = 0.002
TEMP_LSB_C = 1 / 256
VCC_LSB_V = 100e-6
# `decode --json` rounds dBm to 3 decimals, mA to 3, C and V to 4: allowed on top of 1 LSB.
DBM_ROUNDING = 0.0005

BAD_CHECKSUM_FILE = "qm-dist-a_sfp6.hex"  # lab.yaml story: bad_checksum at qm-dist-a sfp6
OMA_FILE = "qm-core-b_sfp3.hex"  # lab.yaml story: oma_module at qm-core-b sfp3


def decode_json(name: str, capsys: pytest.CaptureFixture[str]) -> tuple[int, dict]:
    code = main(["decode", str(MAPS_DIR / name), "--json"])
    out = capsys.readouterr().out
    return code, json.loads(out)


def power_close(dbm: float | None, mw: float) -> bool:
    """A decoded dBm value (rounded by the JSON) within one LSB of a power in mW."""
    assert dbm is not None
    got = 10 ** (dbm / 10)
    rounding = got * (10 ** (DBM_ROUNDING / 10) - 1)
    return abs(got - mw) <= POWER_LSB_MW + rounding


def test_committed_maps_are_what_the_generator_writes():
    # Guards drift between lab.yaml / the encoders and the committed snapshot.
    assert stale_files(LAB) == []
    assert sorted(p.name for p in MAPS_DIR.glob("*.hex")) == sorted(PORTS)
    # every optic in lab.yaml: 84 links, two ends each (79, plus the five BiDi, CWDM and
    # multimode runs of the consistency stories)
    assert len(PORTS) == 168


def test_maps_stay_small():
    total = sum(p.stat().st_size for p in MAPS_DIR.glob("*.hex"))
    assert total < 400_000, f"maps/ holds {total} bytes"


@pytest.mark.parametrize("name", sorted(PORTS))
def test_every_map_decodes_to_its_lab_optic(name, capsys):
    port = PORTS[name]
    optic = port.optic
    assert optic is not None
    part = optic.part
    code, doc = decode_json(name, capsys)

    if name == BAD_CHECKSUM_FILE:
        assert code == 1
        assert len(doc["problems"]) == 1
        assert doc["problems"][0].startswith("bad checksum CC_BASE")
        assert doc["checksums"]["CC_BASE"]["ok"] is False
    else:
        assert code == 0, doc["problems"]
        assert doc["problems"] == []
        assert all(c["ok"] for c in doc["checksums"].values())

    # identity, PMD, lanes
    assert doc["spec"] == layout_of(part)
    assert doc["form_factor"] == part.form_factor
    assert doc["pmd"] == (part.pmd or None)  # a part with no compliance code: null
    assert (doc["vendor_name"], doc["part_number"], doc["serial"]) == (
        part.vendor, part.part_number, optic.serial)
    assert doc["wavelength_nm"] == pytest.approx(part.wavelength_nm, abs=0.05)
    assert len(doc["lanes"]) == part.lanes
    assert doc["rx_power_type"] == part.rx_power_type
    assert doc["calibration"] == part.calibration

    # thresholds: the part's declared values, within one LSB (plus JSON rounding)
    for key, edges in part.thresholds.items():
        got = doc["thresholds"][key]
        for edge, want in zip(("high_alarm", "low_alarm", "high_warning", "low_warning"),
                              edges, strict=True):
            value = got[edge]
            if key in ("rx_power", "tx_power"):
                assert power_close(value, 10 ** (want / 10)), (key, edge, value, want)
            elif key == "bias":
                assert value == pytest.approx(want, abs=BIAS_LSB_MA + 0.0005)
            elif key == "temperature":
                assert value == pytest.approx(want, abs=TEMP_LSB_C + 0.00005)
            else:
                assert value == pytest.approx(want, abs=VCC_LSB_V + 0.00005)

    # readings: the lab model at the lab epoch, within one LSB
    sample = LAB.sample_port(port, LAB.epoch)
    assert doc["temperature_c"] == pytest.approx(sample.temperature_c, abs=TEMP_LSB_C)
    assert doc["supply_v"] == pytest.approx(sample.supply_v, abs=VCC_LSB_V)
    for lane, want in zip(doc["lanes"], sample.lanes, strict=True):
        assert lane["lane"] == want.lane
        for got_dbm, dark, mw in ((lane["rx_power_dbm"], lane["rx_no_light"], want.rx_mw),
                                  (lane["tx_power_dbm"], lane["tx_no_light"], want.tx_mw)):
            assert mw is not None  # no lab story makes a power sensor stop reporting
            if mw == 0.0:
                assert dark and got_dbm is None
            else:
                assert not dark and power_close(got_dbm, mw), (got_dbm, mw)
        if want.bias_ma is None:  # sensor_unavailable story: a silent sensor maps to 0
            assert lane["bias_ma"] == 0.0
        else:
            assert lane["bias_ma"] == pytest.approx(want.bias_ma, abs=BIAS_LSB_MA)


def test_every_lab_story_is_in_the_maps():
    calibrations = {p.optic.part.calibration for p in PORTS.values()}
    layouts = {layout_of(p.optic.part) for p in PORTS.values()}
    assert calibrations == {"internal", "external"}
    assert layouts == {"SFF-8472", "SFF-8636", "CMIS"}
    assert PORTS[OMA_FILE].optic.part.rx_power_type == "oma"
    assert PORTS[BAD_CHECKSUM_FILE].optic.bad_checksum


def test_external_calibration_raw_bytes_by_offset():
    """Decode one externally calibrated map by hand, from the standard's offsets, without
    the project's decoder, and check both the constants and the result."""
    port = PORTS["qm-core-a_sfp1.hex"]
    part = port.optic.part
    assert part.calibration == "external"
    data = load(MAPS_DIR / "qm-core-a_sfp1.hex")
    a0, a2 = data[:256], data[256:512]
    # A0h byte 92: b6 DDM, b4 external, b3 average power (source: standards.md, verified)
    assert a0[92] & 0x40 and a0[92] & 0x10 and not a0[92] & 0x20 and a0[92] & 0x08
    ext = EXTERNAL_CALIBRATION[part.part_number]
    poly = struct.unpack(">5f", a2[56:76])  # Rx_PWR(4)..(0)
    assert poly == pytest.approx(ext.rx_poly, rel=1e-6)
    slope_tx, offset_tx = struct.unpack(">Hh", a2[80:84])
    slope_i, offset_i = struct.unpack(">Hh", a2[76:80])
    assert (slope_tx / 256, offset_tx) == ext.tx_power
    assert (slope_i / 256, offset_i) == ext.bias
    rx_adc, tx_adc = struct.unpack(">HH", a2[104:106] + a2[102:104])
    bias_adc = struct.unpack(">H", a2[100:102])[0]
    rx_units = sum(c * rx_adc ** (4 - i) for i, c in enumerate(poly))
    tx_units = tx_adc * slope_tx / 256 + offset_tx
    bias_units = bias_adc * slope_i / 256 + offset_i
    sample = LAB.sample_port(port, LAB.epoch)
    lane = sample.lanes[0]
    slope_rx = sum((4 - i) * c * rx_adc ** (3 - i) for i, c in enumerate(poly[:4]))
    # one ADC step of each channel, in result units (0.1 uW, 2 uA)
    assert abs(rx_units * 1e-4 - lane.rx_mw) <= slope_rx * 1e-4
    assert abs(tx_units * 1e-4 - lane.tx_mw) <= slope_tx / 256 * 1e-4
    assert abs(bias_units * 0.002 - lane.bias_ma) <= slope_i / 256 * 0.002
    # An internally calibrated reading of the same raw value would be far off: the
    # calibration actually matters in this file.
    assert abs(rx_adc * 1e-4 - lane.rx_mw) > 5 * 1e-4


def _cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "lightwarden.exporters.app.cli", *args],
                          capture_output=True, text=True, timeout=60, check=False)


def test_cli_process_bad_checksum_exits_1_and_names_the_check():
    path = str(MAPS_DIR / BAD_CHECKSUM_FILE)
    done = _cli("decode", path, "--json")
    assert done.returncode == 1, done.stderr
    doc = json.loads(done.stdout)
    assert doc["file"] == path
    assert any(p.startswith("bad checksum CC_BASE") for p in doc["problems"])
    text = _cli("decode", path)
    assert text.returncode == 1
    assert "CC_BASE BAD" in text.stdout and "bad checksum CC_BASE" in text.stdout


def test_cli_process_oma_and_external_calibration():
    oma = _cli("decode", str(MAPS_DIR / OMA_FILE), "--json")
    assert oma.returncode == 0, oma.stderr
    assert json.loads(oma.stdout)["rx_power_type"] == "oma"
    ext = _cli("decode", str(MAPS_DIR / "qm-core-b_sfp1.hex"))
    assert ext.returncode == 0, ext.stderr
    assert "calibration external" in ext.stdout and "Rx power average" in ext.stdout
    assert "problems      none" in ext.stdout


def test_cli_process_paged_layouts():
    for name, spec, lanes in (("qm-core-a_qsfp1.hex", "SFF-8636", 4),
                              ("qm-dist-b_qsfp1.hex", "CMIS", 4)):
        done = _cli("decode", str(MAPS_DIR / name), "--json")
        assert done.returncode == 0, done.stderr
        doc = json.loads(done.stdout)
        assert doc["spec"] == spec and len(doc["lanes"]) == lanes
        assert all(not math.isnan(ln["rx_power_dbm"]) for ln in doc["lanes"])


def test_maps_dir_is_package_data():
    # pyproject: package-data "lightwarden.fixtures.lab" = ["*.yaml", "maps/*"]
    text = (Path(__file__).resolve().parents[3] / "pyproject.toml").read_text()
    assert '"maps/*"' in text
