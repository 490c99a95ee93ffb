"""The shipped IEEE 802.3 PMD table and its parser.

Reference figures are copied from /work/shared/reference/standards.md, table "IEEE 802.3
optical PMD windows": the 10GBASE-SR/-LR power cells are marked verified there; every
other row is marked memory there, and the checks on them say so.
"""

from __future__ import annotations

from dataclasses import fields

import pytest

from lightwarden.rules.catalogue import (
    COLUMNS,
    Catalogue,
    CatalogueError,
    PmdSpec,
    default_catalogue,
    parse_catalogue,
)

# (name, clause, tx_min, tx_max, rx_overload, rx_min_avg, verified?) -- standards.md
STANDARDS_ROWS = [
    ("1000BASE-SX", "38", -9.5, 0.0, 0.0, -17.0, False),
    ("1000BASE-LX", "38", -11.5, -3.0, -3.0, -19.0, False),
    ("10GBASE-SR", "52", -7.3, -1.0, -1.0, -9.9, True),
    ("10GBASE-LR", "52", -8.2, 0.5, 0.5, -14.4, True),
    ("10GBASE-ER", "52", -4.7, 4.0, -1.0, -15.8, False),
    ("25GBASE-SR", "112", -8.4, 2.4, 2.4, -10.3, False),
    ("25GBASE-LR", "114", -7.0, 2.0, 2.0, -13.3, False),
    ("40GBASE-SR4", "86", -7.6, 2.4, 2.4, -9.5, False),
    ("40GBASE-LR4", "87", -7.0, 2.3, 2.3, -13.7, False),
    ("100GBASE-SR4", "95", -8.4, 2.4, 2.4, -10.3, False),
    ("100GBASE-LR4", "88", -4.3, 4.5, 4.5, -10.6, False),
    ("400GBASE-DR4", "124", -2.9, 4.0, 4.0, -5.9, False),
    ("400GBASE-FR4", "151", -3.3, 3.5, 3.5, -7.3, False),
]


@pytest.mark.parametrize(
    "row",
    STANDARDS_ROWS,
    ids=[
        f"{r[0]}-standards.md-IEEE-802.3-cl.{r[1]}-{'verified' if r[6] else 'from-memory'}"
        for r in STANDARDS_ROWS
    ],
)
def test_every_standards_sheet_row_is_shipped_with_its_figures(row):
    # source: standards.md "IEEE 802.3 optical PMD windows" (verified or memory per id)
    name, clause, tx_min, tx_max, overload, rx_min, verified = row
    spec = default_catalogue()[name]
    assert spec.clause == clause
    assert (spec.tx_min_dbm, spec.tx_max_dbm) == (tx_min, tx_max)
    assert spec.rx_overload_dbm == overload
    assert spec.rx_min_avg_dbm == rx_min
    # The row's own source column must be as honest as the sheet.
    assert ("power verified" in spec.source) is verified
    assert spec.source.startswith(f"IEEE 802.3 cl.{clause} (from memory") is not verified


def test_shipped_table_holds_only_ieee_pmd_names():
    for spec in default_catalogue():
        assert "BASE-" in spec.name and spec.source.startswith("IEEE 802.3")


def test_multi_lane_pmds_have_four_lanes():
    # source: standards.md rows (SR4/LR4/DR4/FR4 are four-lane PMDs by name); from memory
    cat = default_catalogue()
    for name in ("40GBASE-SR4", "40GBASE-LR4", "100GBASE-SR4", "100GBASE-LR4",
                 "400GBASE-DR4", "400GBASE-FR4"):
        assert cat[name].lanes == 4
    assert cat["10GBASE-LR"].lanes == 1


@pytest.mark.parametrize(
    ("name", "budget"),
    [
        pytest.param("10GBASE-LR", 6.2, id="10GBASE-LR-6.2dB-standards.md-computed-verified-rows"),
        pytest.param("1000BASE-LX", 7.5, id="1000BASE-LX-7.5dB-standards.md-computed-memory-rows"),
    ],
)
def test_power_budget_from_rows(name, budget):
    # source: standards.md "Power budget = Tx min - Rx min ... (computed from the rows)"
    assert default_catalogue()[name].power_budget_db == pytest.approx(budget, abs=1e-9)


def test_rx_window_of_10gbase_lr():
    # source: standards.md, 10GBASE-LR overload +0.5 and Rx min -14.4 dBm (verified)
    assert default_catalogue()["10GBASE-LR"].rx_window_db == pytest.approx(14.9)


def test_lookup_is_case_insensitive_and_strips():
    cat = default_catalogue()
    assert cat.get(" 10gbase-lr ") is cat["10GBASE-LR"]
    assert "100gbase-sr4" in cat
    assert cat.get("") is None
    with pytest.raises(KeyError, match="10GBASE-ZZ"):
        cat["10GBASE-ZZ"]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("SFP+ 10GBASE-LR", "10GBASE-LR"),
        ("10GBase-LR SFP+ 1310nm", "10GBASE-LR"),
        ("QSFP28 100GBASE-LR4 module", "100GBASE-LR4"),  # not "10GBASE-LR" inside it
        ("qsfp28 100gbase lr4", "100GBASE-LR4"),
        ("optic 25GBASE_SR", "25GBASE-SR"),
        ("40GBASE-SR4 / 10GBASE-SR breakout", "40GBASE-SR4"),  # longest name wins
        ("10GBASE-LRM", None),  # LRM is not in the shipped table; LR must not match it
        ("1000BASE-T copper", None),
        ("", None),
    ],
)
def test_find_in_text(text, expected):
    found = default_catalogue().find_in_text(text)
    assert (found.name if found else None) == expected


def test_site_additions_extend_and_replace():
    site = parse_catalogue(
        "name,clause,lanes,tx_min_dbm,tx_max_dbm,rx_overload_dbm,rx_min_avg_dbm,source\n"
        "10GBASE-LRM,68,1,-6.5,0.5,1.5,-8.4,Harrowgate Lab acceptance sheet\n"
        "10GBASE-LR,52,1,-8.2,0.5,-1.0,-14.4,Harrowgate Lab tighter overload\n",
        origin="site.csv",
    )
    base = default_catalogue()
    cat = base.with_additions(site)
    assert len(cat) == len(base) + 1
    assert cat["10GBASE-LR"].rx_overload_dbm == -1.0
    assert cat["10GBASE-LR"].source == "Harrowgate Lab tighter overload"
    assert cat.find_in_text("SFP+ 10GBASE-LRM").name == "10GBASE-LRM"
    assert base["10GBASE-LR"].rx_overload_dbm == 0.5  # the shipped table is untouched


def test_default_catalogue_is_read_once():
    assert default_catalogue() is default_catalogue()


def test_spec_fields_match_csv_columns():
    assert tuple(f.name for f in fields(PmdSpec)) == COLUMNS


HEADER = "name,clause,tx_min_dbm,tx_max_dbm,rx_overload_dbm,rx_min_avg_dbm,source\n"


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (HEADER + "X-1,1,-3,0,abc,-10,s\n", r"site\.csv: row 2, column 'rx_overload_dbm'.*'abc'"),
        (HEADER + "X-1,1,-3,0,0,-10,s\nx-1,1,-3,0,0,-10,s\n", r"row 3, column 'name'.*row 2"),
        (HEADER + ",1,-3,0,0,-10,s\n", r"row 2, column 'name'"),
        (HEADER + "X-1,1,-3,0,0,,s\n", r"row 2, column 'rx_min_avg_dbm': a value is required"),
        (HEADER + "X-1,1,-3,0,-12,-10,s\n", r"row 2, column 'rx_min_avg_dbm'.*not below"),
        (HEADER + "X-1,1,0,-3,0,-10,s\n", r"row 2, column 'tx_min_dbm'.*not below"),
        (HEADER + "X-1,1,-3,0,0,-10,\n", r"row 2, column 'source'"),
        (HEADER + "X-1,1,-3,0,0,-10,s,extra\n", r"row 2: more cells"),
        (HEADER + "X-1,1,-3,0,inf,-10,s\n", r"row 2, column 'rx_overload_dbm'.*finite"),
        ("name,colour\nX,red\n", r"row 1: unknown column\(s\) colour"),
        ("name,clause\nX,1\n", r"row 1: missing column\(s\) rx_overload_dbm"),
        ("", r"empty file"),
        ("name,lanes,rx_overload_dbm,rx_min_avg_dbm,source\nX,four,0,-10,s\n",
         r"row 2, column 'lanes'.*'four'"),
    ],
)
def test_bad_site_rows_are_named(text, message):
    with pytest.raises(CatalogueError, match=message):
        parse_catalogue(text, origin="site.csv")


def test_blank_lines_and_optional_cells():
    specs = parse_catalogue(HEADER.replace("\n", ",lanes\n") + "\nX-1,,,,0,-10,site,\n")
    assert len(specs) == 1
    assert specs[0].lanes == 1 and specs[0].tx_min_dbm is None
    assert specs[0].power_budget_db is None
    assert Catalogue(specs).get("x-1") is specs[0]
