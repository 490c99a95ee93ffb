"""The shipped PMD table and its parser.

Reference figures are copied from /work/shared/reference/standards.md, table "IEEE 802.3
optical PMD windows": the 1000BASE-LX and 10GBASE-SR/-LR power cells are marked verified
there; every other row is marked memory there, and the checks on them say so.
"""

from __future__ import annotations

from dataclasses import fields

import pytest

from lightwarden.rules.catalogue import (
    ALSO_RUNS_ON,
    COLUMNS,
    NOT_JUDGED,
    Catalogue,
    CatalogueError,
    PmdSpec,
    default_catalogue,
    parse_catalogue,
)

CAT = default_catalogue()

# (name, fibre, clause, tx_min, tx_max, rx_overload, rx_min_avg, power verified?)
# source: standards.md "IEEE 802.3 optical PMD windows" (verified or memory per row)
STANDARDS_ROWS = [
    ("1000BASE-SX", "", "38", -9.5, 0.0, 0.0, -17.0, False),
    ("1000BASE-LX", "smf", "38", -11.0, -3.0, -3.0, -19.0, True),  # Table 38-7/38-8
    ("1000BASE-LX", "mmf", "38", -11.5, -3.0, -3.0, -19.0, True),  # Table 38-7/38-8
    ("10GBASE-SR", "", "52", -7.3, -1.0, -1.0, -9.9, True),
    ("10GBASE-LR", "", "52", -8.2, 0.5, 0.5, -14.4, True),
    ("10GBASE-ER", "", "52", -4.7, 4.0, -1.0, -15.8, False),
    ("25GBASE-SR", "", "112", -8.4, 2.4, 2.4, -10.3, False),
    ("25GBASE-LR", "", "114", -7.0, 2.0, 2.0, -13.3, False),
    ("40GBASE-SR4", "", "86", -7.6, 2.4, 2.4, -9.5, False),
    ("40GBASE-LR4", "", "87", -7.0, 2.3, 2.3, -13.7, False),
    ("100GBASE-SR4", "", "95", -8.4, 2.4, 2.4, -10.3, False),
    ("100GBASE-LR4", "", "88", -4.3, 4.5, 4.5, -10.6, False),
    ("400GBASE-DR4", "", "124", -2.9, 4.0, 4.0, -5.9, False),
    ("400GBASE-FR4", "", "151", -3.3, 3.5, 3.5, -7.3, False),
]


@pytest.mark.parametrize(
    "row",
    STANDARDS_ROWS,
    ids=[
        f"{r[0]}{'-' + r[1] if r[1] else ''}-standards.md-IEEE-802.3-cl.{r[2]}-"
        f"{'verified' if r[7] else 'from-memory'}"
        for r in STANDARDS_ROWS
    ],
)
def test_every_standards_sheet_row_is_shipped_with_its_figures(row):
    # source: standards.md "IEEE 802.3 optical PMD windows" (verified or memory per id)
    name, fibre, clause, tx_min, tx_max, overload, rx_min, verified = row
    spec = CAT.lookup(name, fibre or None)
    assert spec is not None and spec.fibre == (fibre or spec.fibre)
    assert spec.clause == clause
    assert (spec.tx_min_dbm, spec.tx_max_dbm) == (tx_min, tx_max)
    assert spec.rx_overload_dbm == overload
    assert spec.rx_min_avg_dbm == rx_min
    # The row's own source column must be as honest as the sheet.
    assert spec.source.startswith(f"IEEE 802.3 cl.{clause}")
    assert ("power verified" in spec.source) is verified
    assert ("(from memory" in spec.source or "(power from memory" in spec.source) is not verified


@pytest.mark.parametrize(
    ("name", "budget"),
    [
        pytest.param("10GBASE-LR", 6.2, id="10GBASE-LR-6.2dB-standards.md-computed-verified-rows"),
        pytest.param("1000BASE-LX", 8.0,
                     id="1000BASE-LX-smf-8.0dB-standards.md-IEEE-802.3-Tables-38-7/38-8-verified"),
    ],
)
def test_power_budget_from_rows(name, budget):
    # source: standards.md "Power budget = Tx min - Rx min ... (computed from the rows)"
    assert CAT[name].power_budget_db == pytest.approx(budget, abs=1e-9)


def test_1000base_lx_launch_depends_on_the_fibre():
    # source: IEEE 802.3 Table 38-7 via standards.md (verified): at least -11.0 dBm on
    # single-mode, -11.5 dBm on multimode; budgets 8.0 and 7.5 dB (standards.md, verified)
    smf, mmf = CAT.lookup("1000BASE-LX", "OS2"), CAT.lookup("1000BASE-LX", "OM2")
    assert (smf.fibre, smf.tx_min_dbm, smf.power_budget_db) == ("smf", -11.0, 8.0)
    assert (mmf.fibre, mmf.tx_min_dbm) == ("mmf", -11.5)
    assert mmf.power_budget_db == pytest.approx(7.5)
    assert CAT["1000BASE-LX"] is smf  # the default row is the first, single-mode
    assert CAT.lookup("1000BASE-LX") is smf
    assert CAT.lookup("1000BASE-LX", "mmf") is mmf
    assert CAT.lookup("1000BASE-LX", "copper?") is smf  # an unknown fibre word: default
    assert CAT.variants("1000base-lx") == [smf, mmf]
    # 5 km on SMF, 550 m on MMF (IEEE 802.3 cl.38, standards.md reach column, memory)
    assert smf.reach_for("OS2") == 5000 and mmf.reach_for("OM1") == 550
    assert smf.reach_for("OM2") is None  # the single-mode row states no multimode reach


def test_rx_window_of_10gbase_lr():
    # source: standards.md, 10GBASE-LR overload +0.5 and Rx min -14.4 dBm (verified)
    assert CAT["10GBASE-LR"].rx_window_db == pytest.approx(14.9)


# --- OMA -----------------------------------------------------------------------------
# Definitions: OMA = P1 - P0 and extinction ratio r = P1/P0 (IEEE 802.3 52.9, the
# optical parameter definitions of cl.52; subclause number from memory). The average
# is (P1 + P0)/2, so P_avg = OMA (r + 1) / (2 (r - 1)).


def test_lr_oma_sensitivity_as_average_hand_worked():
    # Hand-worked: 10GBASE-LR Rx sensitivity in OMA -12.6 dBm, minimum ER 3.5 dB (IEEE
    # 802.3 cl.52, from memory). OMA = 10^(-1.26) = 0.054954 mW; r = 10^0.35 = 2.238721;
    # (r+1)/(2(r-1)) = 3.238721/2.477442 = 1.307284; P_avg = 0.071841 mW = -11.436 dBm.
    # The "about -11.4 dBm average, not -14.4" (from memory) agrees.
    lr = CAT["10GBASE-LR"]
    assert (lr.rx_sens_oma_dbm, lr.er_min_db, lr.oma_clause) == (-12.6, 3.5, "52")
    assert lr.rx_sens_avg_from_oma_dbm == pytest.approx(-11.436, abs=0.001)
    # Tx: OMA min -5.2 dBm (from memory) -> 0.301995 mW x 1.307284 = 0.394791 mW = -4.036 dBm
    assert lr.tx_min_avg_from_oma_dbm == pytest.approx(-4.036, abs=0.001)
    # derived, never binding: the judged edges stay the average-power rows
    assert (lr.rx_min_avg_dbm, lr.tx_min_dbm) == (-14.4, -8.2)


@pytest.mark.parametrize("er_db", [1.0, 3.0, 3.5, 6.0, 9.0])
def test_derived_average_reproduces_the_oma_and_er_definitions(er_db):
    # Rebuild the two levels from the derived average and check the definitions hold:
    # P1 = 2 P_avg r/(r+1), P0 = 2 P_avg/(r+1); OMA = P1 - P0 and r = P1/P0 (IEEE 802.3 52.9)
    spec = PmdSpec("X-1", "", None, None, None, 1, None, None, None, None, "test",
                   rx_sens_oma_dbm=-10.0, er_min_db=er_db)
    p_avg = 10 ** (spec.rx_sens_avg_from_oma_dbm / 10)
    r = 10 ** (er_db / 10)
    p1, p0 = 2 * p_avg * r / (r + 1), 2 * p_avg / (r + 1)
    assert p1 - p0 == pytest.approx(0.1, rel=1e-12)  # -10 dBm = 0.1 mW
    assert p1 / p0 == pytest.approx(r, rel=1e-12)


def test_oma_to_average_limits():
    # Limits of (r+1)/(2(r-1)) (computed by hand): r -> infinity gives 1/2, i.e.
    # P_avg = OMA/2 = OMA - 3.010 dB; ER 3.0 dB gives +1.775 dB; ER 9 dB gives -1.911 dB.
    def derived(er):
        return PmdSpec("X", "", None, None, None, 1, None, None, None, None, "t",
                       rx_sens_oma_dbm=0.0, er_min_db=er).rx_sens_avg_from_oma_dbm

    assert derived(200.0) == pytest.approx(-3.0103, abs=1e-4)
    assert derived(3.0) == pytest.approx(1.775, abs=0.001)
    assert derived(9.0) == pytest.approx(-1.911, abs=0.001)
    assert PmdSpec("X", "", None, None, None, 1, None, None, None, None, "t").\
        rx_sens_avg_from_oma_dbm is None


def test_oma_columns_agree_with_the_average_columns():
    # Physics, not a table: any two-level signal has P_avg >= OMA/2 (r -> infinity), so
    # a row's minimum average launch / receive power can never sit more than 3.01 dB
    # below its OMA minimum; and at the minimum ER a compliant part needs at least the
    # derived average. IEEE 802.3 cl.52 puts its informative minimum average launch
    # powers at the OMA/2 limit (from memory: -5.2 dBm OMA -> -8.2 dBm for LR), so
    # LR/SR/ER Tx land within 0.02 dB of it. A typo in an OMA cell breaks this.
    rows = [s for s in CAT if s.tx_oma_min_dbm is not None or s.rx_sens_oma_dbm is not None]
    assert len(rows) >= 8
    for s in rows:
        assert s.er_min_db is not None and s.oma_clause, s.name
        if s.tx_oma_min_dbm is not None and s.tx_min_dbm is not None:
            assert s.tx_min_dbm >= s.tx_oma_min_dbm - 3.0103 - 0.01, s.name
            assert s.tx_min_avg_from_oma_dbm >= s.tx_min_dbm, s.name
        if s.rx_sens_oma_dbm is not None and s.rx_min_avg_dbm is not None:
            assert s.rx_min_avg_dbm >= s.rx_sens_oma_dbm - 3.0103 - 0.01, s.name
            assert s.rx_sens_avg_from_oma_dbm >= s.rx_min_avg_dbm, s.name
    for name in ("10GBASE-SR", "10GBASE-LR", "10GBASE-ER"):
        s = CAT[name]
        assert s.tx_min_dbm == pytest.approx(s.tx_oma_min_dbm - 3.0103, abs=0.02), name


# --- fibre, reach, bands ---------------------------------------------------------------


@pytest.mark.parametrize(
    ("grade", "reach"),
    [
        pytest.param("OM1", 33, id="OM1-33m-IEEE-802.3-cl.52-from-memory"),
        pytest.param("OM2", 82, id="OM2-82m-IEEE-802.3-cl.52-from-memory"),
        pytest.param("OM3", 300, id="OM3-300m-standards.md-from-memory"),
        pytest.param("OM4", 400, id="OM4-400m-standards.md-from-memory-common-practice"),
        pytest.param("OM5", 400, id="OM5-as-OM4-common-practice"),
        pytest.param("OS2", None, id="OS2-none-multimode-PMD"),
    ],
)
def test_10gbase_sr_reach_by_grade(grade, reach):
    assert CAT["10GBASE-SR"].reach_for(grade) == reach


@pytest.mark.parametrize(
    ("name", "om3", "om4"),
    [
        ("25GBASE-SR", 70, 100),    # standards.md "70 m OM3 / 100 m OM4" (memory)
        ("40GBASE-SR4", 100, 150),  # standards.md "100 m OM3 / 150 m OM4" (memory)
        ("100GBASE-SR4", 70, 100),  # standards.md "70 m OM3 / 100 m OM4" (memory)
    ],
)
def test_multimode_reach_matches_the_sheet(name, om3, om4):
    spec = CAT[name]
    assert (spec.reach_for("OM3"), spec.reach_for("OM4")) == (om3, om4)
    assert spec.single_mode is False


def test_10gbase_er_reach_is_30_km_with_40_km_engineered():
    # IEEE 802.3 cl.52: 30 km, links to 40 km are engineered links (from memory; the
    # standards.md sheet gives "40 km", memory)
    er = CAT["10GBASE-ER"]
    assert (er.reach_m, er.reach_engineered_m) == (30000, 40000)
    assert er.reach_for("OS2") == 30000


def test_single_mode_and_cross_fibre_pmds():
    assert CAT["10GBASE-LR"].single_mode is True
    assert CAT["10GBASE-SR"].single_mode is False
    assert PmdSpec("X", "", None, None, None, 1, None, None, None, None, "t").single_mode is None
    # made for the other fibre too: IEEE 802.3 cl.38 (LX with a mode-conditioning cord)
    assert CAT["1000BASE-LX"].runs_on("OM2") is True
    assert CAT["10GBASE-LRM"].runs_on("OS2") is True  # common practice, see ALSO_RUNS_ON
    assert CAT["10GBASE-LR"].runs_on("OM3") is False
    assert CAT["10GBASE-SR"].runs_on("OS2") is False
    assert CAT["10GBASE-SR"].runs_on("OM4") is True
    assert CAT["10GBASE-SR"].runs_on("bogus") is None
    assert set(ALSO_RUNS_ON) <= {s.name for s in CAT}


_LAN_WDM = ((1294.53, 1296.59), (1299.02, 1301.09), (1303.54, 1305.63), (1308.09, 1310.19))
_CWDM = tuple((c - 6.5, c + 6.5) for c in (1271.0, 1291.0, 1311.0, 1331.0))


@pytest.mark.parametrize(
    ("name", "lanes"),
    [
        # LAN-WDM lane ranges: IEEE 802.3 cl.88 (from memory; agrees with a published
        # restatement of the cl.88 table: 1294.53-1296.59 ... 1308.09-1310.19 nm)
        ("100GBASE-LR4", _LAN_WDM),
        ("100GBASE-ER4", _LAN_WDM),
        ("200GBASE-LR4", _LAN_WDM),
        # CWDM lanes 1271/1291/1311/1331 nm +-6.5 nm: IEEE 802.3 cl.87/151 (from memory)
        ("40GBASE-LR4", _CWDM),
        ("40GBASE-ER4", _CWDM),
        ("400GBASE-FR4", _CWDM),
        ("100G CWDM4", _CWDM),
    ],
)
def test_wdm_bands_cover_the_lane_grid_edges(name, lanes):
    spec = CAT[name]
    for low, high in lanes:
        assert spec.in_band(low) and spec.in_band(high), (name, low, high)
    # the band is the lane grid's outer edges, not the outer lane centres
    assert spec.wavelength_band() == (lanes[0][0], lanes[-1][1])


def test_1000base_lx_band_verified():
    # standards.md: 1000BASE-LX 1270-1355 nm (verified)
    assert CAT["1000BASE-LX"].wavelength_band() == (1270.0, 1355.0)
    # a 1550 nm module advertising the LX code is outside the band
    assert CAT["1000BASE-LX"].in_band(1550.0, 10.0) is False


def test_in_band_edges_and_tolerance():
    lr = CAT["10GBASE-LR"]  # 1260-1355 nm
    assert lr.in_band(1260.0) and lr.in_band(1355.0)
    assert lr.in_band(1356.0) is False and lr.in_band(1356.0, 1.0) is True
    assert lr.in_band(float("nan")) is None
    assert CAT["1000BASE-BX10"].wavelength_band() is None
    assert CAT["1000BASE-BX10"].in_band(1310.0) is None


def test_bidi_direction_from_the_module_wavelength():
    # IEEE 802.3 cl.59: BX10-D transmits 1480-1500 nm, BX10-U 1260-1360 nm (from memory)
    assert CAT.lookup("1000BASE-BX10", wavelength_nm=1490).name == "1000BASE-BX10-D"
    assert CAT.lookup("1000BASE-BX10", wavelength_nm=1310).name == "1000BASE-BX10-U"
    # the common 1310/1550 pair is not IEEE BX10: no side holds 1550 nm, the row stays
    assert CAT.lookup("1000BASE-BX10", wavelength_nm=1550).name == "1000BASE-BX10"
    assert CAT.lookup("1000BASE-BX10").name == "1000BASE-BX10"
    # a row with its own band is never moved by the wavelength
    assert CAT.lookup("10GBASE-LR", wavelength_nm=1550).name == "10GBASE-LR"


# --- coverage of what the decoders emit ------------------------------------------------


def _decoder_names() -> set[str]:
    from lightwarden.collector.eeprom import codes

    names: set[str] = set()
    for table in (codes.SFF8472_BYTE3, codes.SFF8472_BYTE6, codes.SFF8636_BYTE131):
        names |= {name for _bit, name in table}
    for four, one in codes.EXTENDED_COMPLIANCE.values():
        names |= {four, one}
    names |= set(codes.CMIS_SMF_MEDIA.values()) | set(codes.CMIS_MMF_MEDIA.values())
    return names


def _lab_names() -> set[str]:
    from pathlib import Path

    import yaml

    lab = Path(__file__).resolve().parents[3] / "fixtures" / "lab" / "lab.yaml"
    found: set[str] = set()

    def walk(node: object) -> None:
        if isinstance(node, dict):
            for k, v in node.items():
                # "" is a coloured part that declares no compliance code: no row to have
                if k == "pmd" and isinstance(v, str) and v:
                    found.add(v)
                walk(v)
        elif isinstance(node, list):
            for item in node:
                walk(item)

    walk(yaml.safe_load(lab.read_text("utf-8")))
    return found


def test_every_name_the_decoders_emit_has_a_row_or_a_mapping():
    # Before this table grew, 37 of these 50 names had no row.
    names = _decoder_names()
    assert len(names) >= 50
    missing = sorted(n for n in names if not CAT.covers(n))
    assert missing == []
    optical = [n for n in names if n not in NOT_JUDGED]
    assert all(CAT.get(n) is not None for n in optical)


def test_every_lab_pmd_has_a_row_with_levels():
    names = _lab_names()
    assert names
    for name in names:
        assert CAT.get(name) is not None and CAT[name].has_power_figures, name


def test_not_judged_names_are_not_rows():
    for name, why in NOT_JUDGED.items():
        assert CAT.get(name) is None and why
        assert CAT.covers(name) and CAT.not_judged_reason(name.lower()) == why


@pytest.mark.parametrize(
    ("name", "row"),
    [
        ("10GBASE-SW", "10GBASE-SR"),   # WAN PHY on the cl.52 PMD (from memory)
        ("10gbase-lw", "10GBASE-LR"),
        ("10GBASE-EW", "10GBASE-ER"),
        ("4x10GBASE-SR", "10GBASE-SR"),  # breakout: the per-lane PMD
        ("4x25GBASE-SR", "25GBASE-SR"),
        ("100g  cwdm4", "100G CWDM4"),
    ],
)
def test_aliases_and_breakouts(name, row):
    assert CAT.get(name).name == row
    assert name in CAT


def test_one_by_breakout_is_not_a_breakout():
    assert CAT.get("1x10GBASE-SR") is None


def test_every_row_says_where_its_figures_come_from():
    for spec in CAT:
        assert spec.source
        if spec.clause:
            assert spec.source.startswith(f"IEEE 802.3 cl.{spec.clause}"), spec.name
        else:  # no IEEE clause: an MSA or common practice, and it says which
            assert any(w in spec.source for w in ("MSA", "Alliance", "common practice",
                                                 "SFF-8024")), spec.name
        assert any(w in spec.source for w in ("from memory", "verified")), spec.name
        if not spec.has_power_figures:
            assert "power figures not shipped" in spec.source or "no IEEE clause" in spec.source
        assert spec.fibre in ("smf", "mmf"), spec.name


@pytest.mark.parametrize(
    ("name", "lanes"),
    [("10GBASE-LR", 1), ("40GBASE-SR4", 4), ("100GBASE-SR10", 10), ("100GBASE-SR2", 2),
     ("400GBASE-SR16", 16), ("400GBASE-SR8", 8), ("400GBASE-FR8", 8), ("400GBASE-DR4", 4),
     ("100G PSM4", 4), ("100GBASE-DR", 1)],
)
def test_lane_counts_follow_the_names(name, lanes):
    # the lane count is in the PMD name (IEEE 802.3 naming: the trailing digit)
    assert CAT[name].lanes == lanes


def test_lookup_is_case_insensitive_and_strips():
    assert CAT.get(" 10gbase-lr ") is CAT["10GBASE-LR"]
    assert "100gbase-sr4" in CAT
    assert CAT.get("") is None
    with pytest.raises(KeyError, match="10GBASE-ZZ"):
        CAT["10GBASE-ZZ"]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("SFP+ 10GBASE-LR", "10GBASE-LR"),
        ("10GBase-LR SFP+ 1310nm", "10GBASE-LR"),
        ("QSFP28 100GBASE-LR4 module", "100GBASE-LR4"),  # not "10GBASE-LR" inside it
        ("qsfp28 100gbase lr4", "100GBASE-LR4"),
        ("optic 25GBASE_SR", "25GBASE-SR"),
        ("40GBASE-SR4 / 10GBASE-SR breakout", "40GBASE-SR4"),  # longest name wins
        ("10GBASE-LRM", "10GBASE-LRM"),  # LRM has a row; LR must not match inside it
        ("SFP+ 10GBASE-LRM 1310nm", "10GBASE-LRM"),
        ("QSFP+ 4x10GBASE-SR breakout", "10GBASE-SR"),
        ("XFP 10GBASE-LW", "10GBASE-LR"),
        ("1000BASE-T copper", None),
        ("", None),
    ],
)
def test_find_in_text(text, expected):
    found = CAT.find_in_text(text)
    assert (found.name if found else None) == expected


# --- site rows -------------------------------------------------------------------------


def test_site_additions_extend_and_replace():
    site = parse_catalogue(
        "name,clause,lanes,tx_min_dbm,tx_max_dbm,rx_overload_dbm,rx_min_avg_dbm,source\n"
        "10GBASE-XR,,1,-6.5,0.5,1.5,-8.4,Quillmoor Lab acceptance sheet\n"
        "10GBASE-LR,52,1,-8.2,0.5,-1.0,-14.4,Quillmoor Lab tighter overload\n",
        origin="site.csv",
    )
    cat = CAT.with_additions(site)
    assert len(cat) == len(CAT) + 1
    assert cat["10GBASE-LR"].rx_overload_dbm == -1.0
    assert cat["10GBASE-LR"].source == "Quillmoor Lab tighter overload"
    assert cat.find_in_text("SFP+ 10GBASE-XR").name == "10GBASE-XR"
    assert CAT["10GBASE-LR"].rx_overload_dbm == 0.5  # the shipped table is untouched


def test_a_site_row_replaces_every_fibre_variant():
    site = parse_catalogue(
        "name,rx_overload_dbm,rx_min_avg_dbm,tx_min_dbm,source\n"
        "1000BASE-LX,-3.0,-20.0,-10.0,Quillmoor acceptance sheet\n", origin="site.csv")
    cat = CAT.with_additions(site)
    assert cat.lookup("1000BASE-LX", "OM2").tx_min_dbm == -10.0
    assert len(cat.variants("1000BASE-LX")) == 1


def test_site_rows_with_the_new_columns():
    site = parse_catalogue(
        "name,clause,fibre,wavelength_min_nm,wavelength_max_nm,rx_overload_dbm,"
        "rx_min_avg_dbm,source,reach_om3_m,reach_om4_m,tx_oma_min_dbm,rx_sens_oma_dbm,"
        "er_min_db,oma_clause\n"
        "QM-850,,mmf,840,860,0,-11,Quillmoor sheet,200,250,-5,-12,3.0,Quillmoor spec 4\n"
        "QM-850,,smf,840,860,0,-13,Quillmoor sheet,,,,,,\n",
        origin="site.csv",
    )
    cat = CAT.with_additions(site)
    mmf = cat.lookup("qm-850", "OM4")
    assert (mmf.fibre, mmf.reach_for("OM4"), mmf.reach_for("OM3")) == ("mmf", 250, 200)
    assert mmf.rx_sens_avg_from_oma_dbm == pytest.approx(-12 + 1.775, abs=0.001)
    assert cat.lookup("QM-850", "OS2").rx_min_avg_dbm == -13
    assert cat["QM-850"] is mmf


def test_a_row_built_in_code_without_the_new_fields():
    # exporters/app/wiring.py builds site rows by keyword without the optional columns
    spec = PmdSpec(name="X-9", clause="", wavelength_min_nm=None, wavelength_max_nm=None,
                   reach_m=None, lanes=1, tx_min_dbm=None, tx_max_dbm=None,
                   rx_overload_dbm=0.0, rx_min_avg_dbm=-10.0, source="site")
    assert (spec.fibre, spec.rx_sens_avg_from_oma_dbm, spec.reach_for("OM3")) == ("", None, None)
    assert CAT.with_additions([spec]).lookup("X-9", "OS2") is spec


def test_default_catalogue_is_read_once():
    assert default_catalogue() is default_catalogue()


def test_spec_fields_match_csv_columns():
    assert tuple(f.name for f in fields(PmdSpec)) == COLUMNS


HEADER = "name,clause,tx_min_dbm,tx_max_dbm,rx_overload_dbm,rx_min_avg_dbm,source\n"
WIDE = "name,rx_overload_dbm,rx_min_avg_dbm,source,fibre,reach_om3_m,er_min_db," \
       "rx_sens_oma_dbm,oma_clause,clause\n"


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (HEADER + "X-1,1,-3,0,abc,-10,s\n", r"site\.csv: row 2, column 'rx_overload_dbm'.*'abc'"),
        (HEADER + "X-1,1,-3,0,0,-10,s\nx-1,1,-3,0,0,-10,s\n", r"row 3, column 'name'.*row 2"),
        (HEADER + ",1,-3,0,0,-10,s\n", r"row 2, column 'name'"),
        (HEADER + "X-1,1,-3,0,0,,s\n", r"row 2, column 'rx_min_avg_dbm': a value is required"),
        (HEADER + "X-1,1,-3,0,,-10,s\n", r"row 2, column 'rx_overload_dbm': a value is required"),
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
        (WIDE + "X,0,-10,s,copper,,,,,\n", r"row 2, column 'fibre'.*'copper'.*smf, mmf"),
        (WIDE + "X,0,-10,s,smf,,,,,\nX,0,-10,s,SMF,,,,,\n",
         r"row 3, column 'name'.*already defined for fibre smf in row 2"),
        (WIDE + "X,0,-10,s,mmf,-5,,,,\n", r"row 2, column 'reach_om3_m'.*above 0"),
        (WIDE + "X,0,-10,s,mmf,,0,,,\n", r"row 2, column 'er_min_db'.*above 0 dB"),
        (WIDE + "X,0,-10,s,mmf,,3,-12,,\n", r"row 2, column 'oma_clause'.*clause"),
        (WIDE + "X,0,-10,s,mmf,,3,nope,,52\n", r"row 2, column 'rx_sens_oma_dbm'.*'nope'"),
    ],
)
def test_bad_site_rows_are_named(text, message):
    with pytest.raises(CatalogueError, match=message):
        parse_catalogue(text, origin="site.csv")


def test_same_name_on_two_fibres_is_two_rows():
    specs = parse_catalogue(WIDE + "X,0,-10,s,smf,,,,,\nX,0,-11,s,mmf,,,,,\n")
    cat = Catalogue(specs)
    assert len(cat) == 2 and cat.names() == ["X"]
    assert cat.lookup("x", "OM3").rx_min_avg_dbm == -11


def test_a_row_without_receive_levels():
    specs = parse_catalogue("name,rx_overload_dbm,rx_min_avg_dbm,source,fibre,"
                            "wavelength_min_nm,wavelength_max_nm\nQ-1,,,site,smf,1300,1320\n")
    assert specs[0].has_power_figures is False
    assert specs[0].rx_window_db is None and specs[0].in_band(1310) is True


def test_blank_lines_and_optional_cells():
    specs = parse_catalogue(HEADER.replace("\n", ",lanes\n") + "\nX-1,,,,0,-10,site,\n")
    assert len(specs) == 1
    assert specs[0].lanes == 1 and specs[0].tx_min_dbm is None
    assert specs[0].power_budget_db is None
    assert Catalogue(specs).get("x-1") is specs[0]
