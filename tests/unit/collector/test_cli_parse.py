"""CLI output parsing: units, odd cells, unmatched rows, thresholds, inventory (no network)."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from lightwarden.collector.readings import Quantity, ReadingStatus
from lightwarden.collector.ssh.cli_parse import (
    compiled_template,
    parse_outputs,
    read_cell,
    run_template,
    split_transcript,
)
from lightwarden.collector.ssh.platforms.check import check_transcript
from lightwarden.collector.ssh.platforms.check import main as check_main
from lightwarden.collector.ssh.platforms.platform import load_platform

RX, TX, BIAS = Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS


@pytest.fixture(scope="module")
def qmos():
    return load_platform("qmos")


# -- unit conversions --------------------------------------------------------------------


@pytest.mark.parametrize(
    ("shown", "unit", "dbm"),
    [
        # source: standards.md "Units and conversions", computed from the textbook definition
        ("0.5", "mW", -3.010),
        ("0.1", "mW", -10.000),
        ("2", "mW", 3.010),
        ("36.31", "uW", -14.40),
        ("151.4", "uW", -8.20),
        # source: standards.md SFF-8472 worked decodes (800.0 uW = -0.969 dBm; 1 mW = 0 dBm)
        ("800.0", "uW", -0.969),
        ("1.0000", "mW", 0.000),
    ],
)
def test_power_units_convert_to_dbm(qmos, shown, unit, dbm):
    cell = read_cell(shown, RX, unit, qmos)
    assert cell.status is ReadingStatus.OK
    # standards.md rounds to 3 decimals (2 for the uW rows)
    assert cell.value == pytest.approx(dbm, abs=0.0051 if unit == "uW" else 0.0006)


def test_dbm_passes_through_and_bias_ua_becomes_ma(qmos):
    assert read_cell("-7.25", TX, "dBm", qmos).value == pytest.approx(-7.25)
    # 1 mA = 1000 uA (SI prefixes)
    assert read_cell("35154.0", BIAS, "uA", qmos).value == pytest.approx(35.154)
    assert read_cell("3.301", Quantity.SUPPLY, "V", qmos).value == pytest.approx(3.301)


def test_zero_power_is_no_light_never_a_number(qmos):
    # source: standards.md "no light": a power reading of 0 has no dBm value (practice)
    for shown, unit in (("0.0000", "mW"), ("0", "uW"), ("-inf", "dBm")):
        cell = read_cell(shown, RX, unit, qmos)
        assert cell.status is ReadingStatus.NO_LIGHT, shown
        assert cell.value is None
        assert "no light" in cell.note


@pytest.mark.parametrize(
    ("shown", "quantity", "status", "in_note"),
    [
        ("--", RX, ReadingStatus.NO_LIGHT, "'--'"),
        ("-INF", TX, ReadingStatus.NO_LIGHT, "no light"),
        ("N/A", RX, ReadingStatus.UNSUPPORTED, "'N/A'"),
        ("n/s", BIAS, ReadingStatus.UNSUPPORTED, "not supported"),
        ("--", BIAS, ReadingStatus.UNSUPPORTED, "no reading"),
        ("", Quantity.TEMPERATURE, ReadingStatus.UNSUPPORTED, "blank"),
        ("   ", RX, ReadingStatus.UNSUPPORTED, "blank"),
        ("abc", RX, ReadingStatus.INVALID, "'abc'"),
        ("nan", BIAS, ReadingStatus.INVALID, "not a number"),
        ("-0.2", RX, ReadingStatus.INVALID, "negative"),
    ],
)
def test_odd_cells_get_a_status_and_a_reason(qmos, shown, quantity, status, in_note):
    unit = "mW" if quantity in (RX, TX) else ("mA" if quantity is BIAS else "C")
    cell = read_cell(shown, quantity, unit, qmos)
    assert cell.status is status
    assert cell.value is None
    assert in_note in cell.note


def test_unit_that_does_not_fit_the_quantity_is_invalid(qmos):
    cell = read_cell("3.2", RX, "mA", qmos)
    assert cell.status is ReadingStatus.INVALID and "unit" in cell.note


# -- whole tables ------------------------------------------------------------------------

DIAG_MW = """\
Optics diagnostics (3 modules)
Port   Lane  Rx(mW)  Tx(mW)  Bias(uA)  Temp(C)  Supply(V)
-----  ----  ------  ------  --------  -------  ---------
sfp1   1     0.5000  0.1000  35154.0   31.5     3.328
sfp2   1     --      N/A     N/A       30.3
sfp7   1     0.4048
qsfp1  1     2.0000  1.0422  48163.9   39.4     3.334
qsfp1  2     0.3685  1.1348  48124.0
something the template has never seen
"""

INVENTORY = """\
Optics inventory
Port   Form    PMD           Wavelength(nm)  Part           Serial      Vendor
-----  ------  ------------  --------------  -------------  ----------  ---------
sfp1   SFP+    10GBASE-LR    1310            LF-10GLR-10    QMLU000007  LUMENFOLD
sfp2   SFP+    10GBASE-LR    1310            LF-10GLR-10    QMLU000008  LUMENFOLD
sfp7   SFP+    10GBASE-LR    1310            LF-10GLR-10    QMLU000013  LUMENFOLD
qsfp1  QSFP28  100GBASE-LR4  1304.6          TK-100GLR4-10  QMTA000099  TARNKEEL
"""

THRESHOLDS_MW = """\
Optics thresholds
Port   Quantity     Unit  High-alarm  High-warn  Low-warn  Low-alarm
-----  -----------  ----  ----------  ---------  --------  ---------
sfp1   rx-power     mW    2.0000      1.0000     0.0363    0.0000
sfp1   bias         uA    80000.0     70000.0    N/A       10000.0
sfp1   supply       V     3.60        3.50       3.10      3.00
"""


def _rows(batch):
    return {(o.port, lane, q): (v, s, note) for o, lane, q, v, s, note in batch.rows()}


def test_table_rows_units_and_module_quantities(qmos):
    result = parse_outputs(
        "qm-test", qmos,
        {"optics diagnostics": DIAG_MW, "optics inventory": INVENTORY,
         "optics thresholds": THRESHOLDS_MW},
        taken_at=1000.0,
    )
    rows = _rows(result.batch)
    assert result.batch.device == "qm-test" and result.batch.taken_at == 1000.0
    # source: standards.md units table: 0.5 mW -> -3.010 dBm, 0.1 mW -> -10.000, 2 mW -> +3.010
    assert rows[("sfp1", 1, RX)][0] == pytest.approx(-3.0103, abs=1e-4)
    assert rows[("sfp1", 1, TX)][0] == pytest.approx(-10.0, abs=1e-9)
    assert rows[("qsfp1", 1, RX)][0] == pytest.approx(3.0103, abs=1e-4)
    assert rows[("sfp1", 1, BIAS)][0] == pytest.approx(35.154)
    # module quantities are lane 0 and come from the port's first lane row only
    assert rows[("qsfp1", 0, Quantity.TEMPERATURE)][0] == pytest.approx(39.4)
    assert ("qsfp1", 2, Quantity.TEMPERATURE) not in rows
    assert ("qsfp1", 0, Quantity.TEMPERATURE) in rows
    assert rows[("qsfp1", 2, RX)][1] is ReadingStatus.OK
    # odd cells
    assert rows[("sfp2", 1, RX)][1] is ReadingStatus.NO_LIGHT
    assert rows[("sfp2", 1, TX)][1] is ReadingStatus.UNSUPPORTED
    assert rows[("sfp2", 0, Quantity.SUPPLY)][1] is ReadingStatus.UNSUPPORTED
    assert "blank" in rows[("sfp2", 0, Quantity.SUPPLY)][2]
    # identity from the inventory, lanes from the table
    optics = {o.port: o for o in result.batch.optics}
    assert optics["qsfp1"].pmd == "100GBASE-LR4" and optics["qsfp1"].lanes == 2
    assert optics["qsfp1"].wavelength_nm == pytest.approx(1304.6)
    assert optics["sfp1"].serial == "QMLU000007" and optics["sfp1"].pmd_source == "inventory"
    assert optics["sfp1"].form_factor == "SFP+" and optics["sfp1"].part_number == "LF-10GLR-10"


def test_unmatched_rows_are_reported_never_dropped(qmos):
    result = parse_outputs(
        "qm-test", qmos, {"optics diagnostics": DIAG_MW, "optics inventory": INVENTORY,
                          "optics thresholds": THRESHOLDS_MW}, 0.0,
    )
    joined = "\n".join(result.problems)
    # the cut-short row (line 6) and the stray line (line 10), each with its line number
    assert "line 6 not understood: 'sfp7   1     0.4048'" in joined
    assert "line 9 not understood: 'something the template has never seen'" in joined
    rows = _rows(result.batch)
    # the cut-short row names a known port and lane: its readings are INVALID, with the line
    for q in (RX, TX, BIAS):
        value, status, note = rows[("sfp7", 1, q)]
        assert status is ReadingStatus.INVALID and math.isnan(value)
        assert "sfp7   1     0.4048" in note
    assert rows[("sfp7", 0, Quantity.TEMPERATURE)][1] is ReadingStatus.INVALID
    # the rest of the table is intact
    assert rows[("sfp1", 1, RX)][1] is ReadingStatus.OK


def test_clean_output_has_no_problems(qmos):
    clean = "\n".join(line for line in DIAG_MW.splitlines()
                      if not line.startswith(("sfp7", "something")))
    result = parse_outputs("qm-test", qmos, {"optics diagnostics": clean,
                                             "optics inventory": INVENTORY,
                                             "optics thresholds": THRESHOLDS_MW}, 0.0)
    assert result.problems == []


def test_missing_command_output_is_a_problem(qmos):
    result = parse_outputs("qm-test", qmos, {"optics diagnostics": DIAG_MW}, 0.0)
    assert any("no output for 'optics inventory'" in p for p in result.problems)
    assert any("no output for 'optics thresholds'" in p for p in result.problems)
    assert len(result.batch) > 0


def test_an_error_message_instead_of_a_table_is_reported(qmos):
    result = parse_outputs(
        "qm-test", qmos,
        {"optics diagnostics": "% unknown command: 'optics diagnostics'",
         "optics inventory": INVENTORY, "optics thresholds": THRESHOLDS_MW}, 0.0,
    )
    assert len(result.batch) == 0
    assert any("% unknown command" in p for p in result.problems)


def test_thresholds_convert_units_and_skip_undeclared_edges(qmos):
    result = parse_outputs(
        "qm-test", qmos,
        {"optics diagnostics": DIAG_MW, "optics inventory": INVENTORY,
         "optics thresholds": THRESHOLDS_MW}, 0.0,
    )
    optic = next(o for o in result.batch.optics if o.port == "sfp1")
    rx = optic.thresholds[RX]
    # source: standards.md units table (2 mW -> +3.010 dBm; 36.31 uW -> -14.40 dBm)
    assert rx.high_alarm == pytest.approx(3.0103, abs=1e-4)
    assert rx.high_warning == pytest.approx(0.0, abs=1e-9)
    assert rx.low_warning == pytest.approx(-14.40, abs=0.01)
    assert rx.low_alarm is None  # 0 mW has no dBm value: not a usable threshold
    bias = optic.thresholds[BIAS]
    assert (bias.high_alarm, bias.high_warning, bias.low_warning, bias.low_alarm) == (
        pytest.approx(80.0), pytest.approx(70.0), None, pytest.approx(10.0))
    assert optic.thresholds[Quantity.SUPPLY].low_alarm == pytest.approx(3.0)
    assert TX not in optic.thresholds


def test_unknown_threshold_word_is_reported(qmos):
    text = THRESHOLDS_MW + "sfp1   wobble       mW    1.0  1.0  1.0  1.0\n"
    result = parse_outputs("qm-test", qmos, {"optics diagnostics": DIAG_MW,
                                             "optics inventory": INVENTORY,
                                             "optics thresholds": text}, 0.0)
    assert any("unknown quantity 'wobble'" in p for p in result.problems)


def test_templates_compile_once(qmos):
    path = qmos.template_path("qmos_diagnostics.textfsm")
    assert compiled_template(path) is compiled_template(path)
    # and the compiled template is reusable: two parses give the same rows
    a = run_template(path, DIAG_MW, "UNMATCHED")
    b = run_template(path, DIAG_MW, "UNMATCHED")
    assert a.rows == b.rows and len(a.unmatched) == 2
    assert [r["PORT"] for r in a.rows if r["PORT"]] == ["sfp1", "sfp2", "qsfp1", "qsfp1"]


def test_transcript_splits_by_prompt(qmos):
    transcript = (
        "qm-core-a:qmos> optics inventory\n" + INVENTORY
        + "qm-core-a:qmos> optics diagnostics\n" + DIAG_MW
        + "qm-core-a:qmos> \n"
    )
    outputs = split_transcript(qmos, transcript)
    assert set(outputs) == {"optics inventory", "optics diagnostics"}
    assert outputs["optics inventory"].splitlines()[0] == "Optics inventory"
    assert "qmos>" not in outputs["optics diagnostics"]


# -- the platform guide's examples and the check command ----------------------------------

GUIDE = (Path(load_platform("qmos").base_dir) / "README.md").read_text()


def test_guide_minimal_definition_works(tmp_path):
    yaml_blocks = [b.split("\n", 1) for b in GUIDE.split("```")[1::2]]
    minimal = next(body for head, body in yaml_blocks if "name: brackenfell" in body)
    template = next(body for head, body in yaml_blocks if body.startswith("Value PORT (\\S+)\n"
                                                                          "Value RX"))
    (tmp_path / "brackenfell.yaml").write_text(minimal)
    (tmp_path / "brackenfell_power.textfsm").write_text(template)
    platform = load_platform(tmp_path / "brackenfell.yaml")
    session = (
        "edge-1# transceivers power\n"
        "Interface  Rx      Tx\n"
        "xe1        -7.25   -2.10\n"
        "xe2        -inf    -2.30\n"
        "edge-1#\n"
    )
    report = check_transcript(platform, session)
    assert report.clean, report.render()
    rows = _rows(report.result.batch)
    assert rows[("xe1", 1, RX)][0] == pytest.approx(-7.25)
    assert rows[("xe2", 1, RX)][1] is ReadingStatus.NO_LIGHT


def test_guide_worked_example_matches_its_stated_result(qmos):
    sample = next(b.split("\n", 1)[1] for b in GUIDE.split("```")[1::2]
                  if "qm-core-a:qmos> optics diagnostics" in b)
    outputs = split_transcript(qmos, sample)
    result = parse_outputs("qm-core-a", qmos, outputs, 0.0)
    rows = _rows(result.batch)
    # the guide states: 0.3776 mW -> -4.230 dBm (10*log10, standards.md textbook definition)
    assert round(rows[("sfp1", 1, RX)][0], 3) == -4.230
    assert rows[("sfp1", 1, BIAS)][0] == pytest.approx(35.154)
    assert rows[("sfp2", 1, BIAS)][2] == "bias: not supported (device shows 'N/A')"
    assert ("qsfp1", 2, RX) in rows and ("qsfp1", 0, Quantity.SUPPLY) in rows
    # only inventory/thresholds are missing from the guide's snippet
    assert all(p.startswith("no output for") for p in result.problems)


def test_check_command_exit_codes(tmp_path, capsys):
    session = tmp_path / "session.txt"
    session.write_text("qm-x:qmos> optics diagnostics\n" + DIAG_MW + "qm-x:qmos> \n")
    assert check_main(["qmos", str(session)]) == 1  # the stray lines and missing commands
    out = capsys.readouterr().out
    assert "line 6 not understood" in out and "sfp1" in out
    clean = tmp_path / "clean.txt"
    body = "\n".join(line for line in DIAG_MW.splitlines()
                     if not line.startswith(("sfp7", "something")))
    clean.write_text(
        "qm-x:qmos> optics inventory\n" + INVENTORY + "qm-x:qmos> optics diagnostics\n" + body
        + "\nqm-x:qmos> optics thresholds\n" + THRESHOLDS_MW + "qm-x:qmos> \n"
    )
    assert check_main(["qmos", str(clean)]) == 0, capsys.readouterr().out
    assert check_main(["no-such-platform", str(clean)]) == 2
    assert "no shipped platform" in capsys.readouterr().err
    assert check_main(["qmos", str(tmp_path / "absent.txt")]) == 2
