"""Consistency findings: PMD bands, wavelengths, BiDi pairs, CWDM/DWDM grids, fibre, reach.

Each value names its source beside it. Device names are the fictional lab's style.
"""

from __future__ import annotations

import pytest

from lightwarden.collector.readings import OpticIdentity
from lightwarden.rules.catalogue import default_catalogue
from lightwarden.rules.consistency import (
    Finding,
    Mismatch,
    bidi_complementary,
    check_optic,
    check_pair,
    check_plant,
    check_spans,
    consistency,
    cwdm_channel,
    dwdm_channel,
    dwdm_frequency_thz,
    spans_by_device,
)
from lightwarden.rules.findings import Severity
from lightwarden.rules.plant import Plant
from lightwarden.rules.spanloss import PlantSpan

CAT = default_catalogue()


def _o(device: str, pmd: str, nm: float | None, port: str = "sfp1",
       part: str = "") -> OpticIdentity:
    return OpticIdentity(device=device, port=port, pmd=pmd, wavelength_nm=nm, part_number=part)


def _span(km: float = 2.0, fibre: str = "OS2", cords: bool = False) -> PlantSpan:
    return PlantSpan("qm-a", "sfp1", "qm-b", "sfp1", km, fibre, 1310.0,
                     mode_conditioning=cords)


def _kinds(found: list[Finding]) -> dict[Mismatch, Severity]:
    return {f.kind: f.severity for f in found}


def _pair(pmd_a: str, nm_a: float | None, pmd_b: str, nm_b: float | None) -> list[Finding]:
    return check_pair(_span(), _o("qm-a", pmd_a, nm_a), _o("qm-b", pmd_b, nm_b))


# --- grids ---------------------------------------------------------------------------------


def test_dwdm_grid_formula():
    # source: ITU-T G.694.1: f = 193.1 THz + n x 0.1 (100 GHz) or x 0.05 THz (50 GHz);
    # lambda = c / f, c = 299 792 458 m/s. 193.1 THz is 1552.52 nm (computed).
    assert dwdm_frequency_thz(1552.524) == pytest.approx(193.1, abs=1e-4)
    # 1550.12 nm is channel n = +3 of the 100 GHz grid: 193.4 THz (computed from c / f).
    assert dwdm_channel(1550.12, 100.0) == pytest.approx(193.4)
    # 1552.93 nm sits on the 50 GHz grid at 193.05 THz (computed: c / 193.05 = 1552.93).
    assert dwdm_channel(1552.93, 50.0) == pytest.approx(193.05)


def test_cwdm_grid_formula():
    # source: ITU-T G.694.2: 18 channels, 1271 + 20 k nm, k = 0..17 (1271..1611 nm);
    # +-6.5 nm channel tolerance (from memory); older labels 1270..1610 are the same channels.
    assert cwdm_channel(1271.0) == 1271.0
    assert cwdm_channel(1611.0) == 1611.0
    assert cwdm_channel(1470.0) == 1471.0
    assert cwdm_channel(1251.0) is None  # below the first channel
    assert cwdm_channel(1631.0) is None  # above the last
    assert cwdm_channel(1301.0) is None  # 10 nm from both neighbours: off grid


# --- module band ------------------------------------------------------------------------------


def test_1550_module_coded_1000base_lx_is_out_of_band():
    # source: 1000BASE-LX band 1270-1355 nm (IEEE 802.3 cl.38, verified in standards.md).
    found = check_optic(_o("qm-a", "1000BASE-LX", 1550.0), CAT)
    assert [f.kind for f in found] == [Mismatch.OUT_OF_BAND]
    assert found[0].severity is Severity.WARNING
    assert "1550 nm" in found[0].text and "1270 nm to 1355 nm" in found[0].text
    assert found[0].far_device == ""
    # The same code at 1310 nm, and 10GBASE-LR at 1310 nm (cl.52, 1260-1355), are in band.
    assert check_optic(_o("qm-a", "1000BASE-LX", 1310.0), CAT) == []
    assert check_optic(_o("qm-a", "10GBASE-LR", 1310.0), CAT) == []
    # 850 nm window (10GBASE-SR 840-860 nm, cl.52) with a 1310 nm part coded SR.
    assert _kinds(check_optic(_o("qm-a", "10GBASE-SR", 1310.0), CAT)) == {
        Mismatch.OUT_OF_BAND: Severity.WARNING}


def test_band_check_needs_facts():
    assert check_optic(_o("qm-a", "", 1550.0), CAT) == []
    assert check_optic(_o("qm-a", "1000BASE-LX", None), CAT) == []
    assert check_optic(_o("qm-a", "NOT-A-PMD", 1550.0), CAT) == []
    # BiDi bands depend on the side; the pairing check covers them.
    assert check_optic(_o("qm-a", "1000BASE-BX10", 1490.0), CAT) == []
    # A breakout description is judged as its lane PMD (10GBASE-SR, 840-860 nm).
    assert check_optic(_o("qm-a", "4x10GBASE-SR", 850.0), CAT) == []


# --- duplex pairs --------------------------------------------------------------------------


def test_matching_ends_raise_nothing():
    assert _pair("10GBASE-LR", 1310, "10GBASE-LR", 1310) == []
    assert _pair("", None, "10GBASE-LR", 1310) == []  # unknown facts are not faults
    # A 4x10G breakout facing one of its 10G lanes is the same PMD.
    assert _pair("4x10GBASE-SR", 850, "10GBASE-SR", 850) == []
    # 100GBASE-LR4 nominal centres 1304.6 vs 1310 nm: the same window.
    assert _pair("100GBASE-LR4", 1304.6, "100GBASE-LR4", 1310) == []


def test_pmd_mismatch_carries_both_wavelengths():
    # An 850 nm receiver does not see 1310 nm light: critical (common practice).
    found = _pair("10GBASE-LR", 1310, "10GBASE-SR", 850)
    assert _kinds(found) == {Mismatch.PMD: Severity.CRITICAL}
    assert "10GBASE-LR vs 10GBASE-SR" in found[0].text and "1310 nm and 850 nm" in found[0].text
    # 1310 vs 1550 nm: long-wave receivers usually see both: warning (common practice).
    assert _kinds(_pair("10GBASE-LR", 1310, "10GBASE-ER", 1550)) == {
        Mismatch.PMD: Severity.WARNING}


def test_wavelength_mismatch_with_same_pmd():
    found = _pair("10GBASE-LR", 1310, "10GBASE-LR", 1550)
    assert _kinds(found) == {Mismatch.WAVELENGTH: Severity.WARNING}  # 1311/1551: plain windows
    assert "1310 nm vs 1550 nm" in found[0].text
    assert _kinds(_pair("", 850, "", 1310)) == {Mismatch.WAVELENGTH: Severity.CRITICAL}


def test_adjacent_cwdm_channels_differ():
    # source: ITU-T G.694.2 20 nm grid: 1471 and 1491 nm are adjacent channels.
    found = _pair("1000BASE-LX", 1470, "1000BASE-LX", 1490)
    assert _kinds(found) == {Mismatch.CWDM_CHANNEL: Severity.CRITICAL}
    assert "channel 1471 nm" in found[0].text and "channel 1491 nm" in found[0].text
    assert "20 nm apart" in found[0].text
    # The same channel written in the old and new labels is no mismatch.
    assert _pair("", 1470, "", 1471) == []
    # 1290 (CWDM) vs a plain 1310 part: different channels of the grid.
    assert Mismatch.CWDM_CHANNEL in _kinds(_pair("", 1290, "", 1310))


def test_adjacent_dwdm_channels_differ():
    # source: ITU-T G.694.1 100 GHz grid: 193.4 THz = 1550.12 nm, 193.3 THz = 1550.92 nm.
    found = _pair("", 299_792.458 / 193.4, "", 299_792.458 / 193.3)
    assert _kinds(found) == {Mismatch.DWDM_CHANNEL: Severity.CRITICAL}
    assert "193.40 THz" in found[0].text and "193.30 THz" in found[0].text
    assert "100 GHz apart" in found[0].text
    # Whole-nm reports (SFF-8472 bytes 60-61) of neighbours: 1550 vs 1551 nm = 125 GHz.
    assert "125 GHz apart" in _pair("", 1550, "", 1551)[0].text
    # 50 GHz neighbours (193.40 / 193.45 THz) given to 0.05 nm (CMIS) are told apart too.
    assert _kinds(_pair("", 299_792.458 / 193.4, "", 299_792.458 / 193.45)) == {
        Mismatch.DWDM_CHANNEL: Severity.CRITICAL}
    assert _pair("", 1550.12, "", 1550.12) == []


# --- BiDi ------------------------------------------------------------------------------------


def test_common_bidi_pairs_are_complementary():
    # 1310/1490: 1000BASE-BX10 (IEEE 802.3 cl.59, from memory); 1310/1550 and 1270/1330:
    # standards.md "Rules of thumb" (common practice); 1490/1550: common practice.
    for w1, w2 in ((1310, 1490), (1310, 1550), (1490, 1550), (1270, 1330), (1330, 1270),
                   (1550, 1490)):
        assert bidi_complementary(w1, w2), (w1, w2)
        assert _pair("1000BASE-BX10", w1, "1000BASE-BX10", w2) == [], (w1, w2)
    assert _pair("10GBASE-BR10-U", 1270, "10GBASE-BR10-D", 1330) == []


def test_bidi_same_and_unknown_pairs():
    same = _pair("1000BASE-BX10-U", 1310, "1000BASE-BX10-U", 1310)
    assert _kinds(same) == {Mismatch.BIDI_SAME: Severity.CRITICAL}
    odd = _pair("BIDI-20", 1310, "BIDI-20", 1610)
    assert _kinds(odd) == {Mismatch.BIDI_NOT_COMPLEMENTARY: Severity.WARNING}
    assert "1310 nm and 1610 nm" in odd[0].text
    assert not bidi_complementary(1290, 1330)


def test_bidi_facing_duplex_is_a_pmd_mismatch():
    found = _pair("1000BASE-BX10", 1310, "1000BASE-LX", 1310)
    assert _kinds(found) == {Mismatch.PMD: Severity.CRITICAL}
    assert "single-fibre BiDi" in found[0].text


def test_dual_wavelength_short_reach_parts_identical_at_both_ends():
    # A 40G short-reach "BiDi" sends 850/900 nm over each fibre of a duplex pair and is the
    # same part at both ends (common practice): not a single-fibre pair.
    a = _o("qm-a", "40GBASE-SR BIDI", 850.0, part="QM-40G-SRBIDI")
    b = _o("qm-b", "40GBASE-SR BIDI", 850.0, part="QM-40G-SRBIDI")
    assert check_pair(_span(0.1, "OM4"), a, b) == []
    # The IEEE 802.3cm style names (SR4.2) are dual-wavelength duplex too.
    assert _pair("400GBASE-SR4.2", 850, "400GBASE-SR4.2", 850) == []
    # Different parts still differ.
    assert Mismatch.PMD in _kinds(_pair("40GBASE-SR BIDI", 850, "40GBASE-SR4", 850))


# --- fibre and reach ----------------------------------------------------------------------------


def test_singlemode_optic_on_multimode_plant():
    found = check_plant(_span(0.2, "OM4"), [_o("qm-a", "10GBASE-LR", 1310),
                                           _o("qm-b", "10GBASE-LR", 1310)], CAT)
    assert _kinds(found) == {Mismatch.FIBRE_TYPE: Severity.WARNING}
    assert "OM4 multimode" in found[0].text and "qm-a sfp1 10GBASE-LR" in found[0].text


def test_multimode_optic_on_singlemode_plant_is_critical():
    found = check_plant(_span(0.2, "OS2"), [_o("qm-a", "10GBASE-SR", 850)], CAT)
    assert _kinds(found) == {Mismatch.FIBRE_TYPE: Severity.CRITICAL}


def test_pmds_made_for_multimode():
    # 10GBASE-LRM is made for multimode (IEEE 802.3 cl.68, 220 m, from memory).
    assert check_plant(_span(0.2, "OM3"), [_o("qm-a", "10GBASE-LRM", 1310)], CAT) == []
    # 1000BASE-LX on multimode: with mode-conditioning cords (cl.38) it is fine up to 550 m.
    lx = [_o("qm-a", "1000BASE-LX", 1310), _o("qm-b", "1000BASE-LX", 1310)]
    assert check_plant(_span(0.5, "OM2", cords=True), lx, CAT) == []
    no_cord = check_plant(_span(0.5, "OM2"), lx, CAT)
    assert _kinds(no_cord) == {Mismatch.FIBRE_TYPE: Severity.WARNING}
    assert "mode-conditioning" in no_cord[0].text
    assert Mismatch.BEYOND_REACH in _kinds(check_plant(_span(0.6, "OM2", cords=True), lx, CAT))


def test_span_beyond_reach():
    # 10GBASE-LR: 10 km (IEEE 802.3 cl.52, from memory; the PMD table's reach_m).
    lr = [_o("qm-a", "10GBASE-LR", 1310), _o("qm-b", "10GBASE-LR", 1310)]
    assert check_plant(_span(9.9), lr, CAT) == []
    found = check_plant(_span(12.34), lr, CAT)
    assert _kinds(found) == {Mismatch.BEYOND_REACH: Severity.WARNING}
    assert "12.3 km" in found[0].text and "10GBASE-LR's 10.0 km" in found[0].text
    # 10GBASE-SR by fibre grade: 300 m on OM3, 400 m on OM4, 82 m on OM2 (IEEE 802.3
    # Table 52-6, from memory).
    sr = [_o("qm-a", "10GBASE-SR", 850)]
    assert check_plant(_span(0.35, "OM4"), sr, CAT) == []
    assert "300 m" in check_plant(_span(0.35, "OM3"), sr, CAT)[0].text
    assert "82 m" in check_plant(_span(0.1, "OM2"), sr, CAT)[0].text


# --- over the plant ------------------------------------------------------------------------


def test_consistency_over_the_plant_and_per_device():
    spans = [PlantSpan("qm-a", "sfp1", "qm-b", "sfp1", 2.0, "OS2", 1310.0),
             PlantSpan("qm-c", "sfp1", "qm-d", "sfp1", 2.0, "OS2", 1310.0)]
    plant = Plant(spans, {})
    optics = {
        ("qm-a", "sfp1"): _o("qm-a", "1000BASE-BX10", 1310),
        ("qm-b", "sfp1"): _o("qm-b", "1000BASE-BX10", 1310),
        ("qm-c", "sfp1"): _o("qm-c", "1000BASE-LX", 1550),
        ("qm-d", "sfp1"): _o("qm-d", "1000BASE-LX", 1310),
    }
    found = consistency(plant, optics, CAT)
    assert sorted((f.kind.value, f.device) for f in found) == [
        ("bidi-same-wavelength", "qm-a"), ("wavelength-mismatch", "qm-c"),
        ("wavelength-out-of-band", "qm-c")]
    only_b = consistency(plant, optics, CAT, devices={"qm-b"})
    assert [(f.kind, f.device, f.far_device) for f in only_b] == [
        (Mismatch.BIDI_SAME, "qm-a", "qm-b")]
    assert only_b[0].key == "link|bidi-same-wavelength|qm-a|sfp1|qm-b|sfp1"
    assert only_b[0].involves("qm-b") and not only_b[0].involves("qm-c")
    # Only one end known: plant checks still run, pairing checks wait.
    assert consistency(plant, {("qm-d", "sfp1"): optics[("qm-d", "sfp1")]}, CAT) == []


def test_spans_indexed_by_device_give_the_same_findings():
    spans = [PlantSpan("qm-a", "sfp1", "qm-b", "sfp1", 2.0, "OS2", 1310.0),
             PlantSpan("qm-b", "sfp2", "qm-c", "sfp2", 2.0, "OM4", 850.0)]
    plant = Plant(spans, {})
    index = spans_by_device(plant)
    assert [len(index[d]) for d in ("qm-a", "qm-b", "qm-c")] == [1, 2, 1]
    optics = {("qm-b", "sfp2"): _o("qm-b", "10GBASE-LR", 1310, port="sfp2")}
    by_index = check_spans(index["qm-c"], lambda d, p: optics.get((d, p)), CAT)
    assert by_index == consistency(plant, optics, CAT, devices={"qm-c"})
    assert [f.kind for f in by_index] == [Mismatch.FIBRE_TYPE]


def test_engineered_link_length_counts_as_reach():
    # 10GBASE-ER: 30 km, with 40 km as an engineered link (IEEE 802.3 cl.52, from memory;
    # the PMD table's reach_m and reach_engineered_m).
    er = [_o("qm-a", "10GBASE-ER", 1550), _o("qm-b", "10GBASE-ER", 1550)]
    assert check_plant(_span(33.0), er, CAT) == []
    found = check_plant(_span(45.0), er, CAT)
    assert _kinds(found) == {Mismatch.BEYOND_REACH: Severity.WARNING}
    assert "45.0 km" in found[0].text and "40.0 km (engineered-link length" in found[0].text
