"""Window resolution: precedence per edge, provenance, OMA, practice fallbacks.

PMD figures: standards.md "IEEE 802.3 optical PMD windows" (10GBASE-LR power cells
verified; 100GBASE-LR4 from memory). Practice fallbacks: standards.md "Rules of thumb"
(commercial case 0-70 C, Vcc 3.3 V +-5 %; practice). Precedence is our own rule, documented
in rules/windows.py and rules/README.md; these tests pin it.
"""

from __future__ import annotations

import math

import pytest

from lightwarden.collector.readings import OpticIdentity, Quantity, Thresholds
from lightwarden.rules.catalogue import default_catalogue
from lightwarden.rules.findings import WindowSource
from lightwarden.rules.windows import (
    OMA_NOTE,
    OverrideIndex,
    WindowOverride,
    WindowResolver,
    resolve_windows,
)

RX, TX = Quantity.RX_POWER, Quantity.TX_POWER
CAT = default_catalogue()


def optic(**kw) -> OpticIdentity:
    base = dict(device="harrow-agg-2", port="eth1/7", pmd="10GBASE-LR", part_number="HGL-10L-31",
                serial="HG0001")
    base.update(kw)
    return OpticIdentity(**base)


def test_pmd_table_only_gives_ieee_edges():
    # source: standards.md, 10GBASE-LR Rx min -14.4 / overload +0.5, Tx -8.2/+0.5 (verified)
    ws = resolve_windows(optic(), CAT)
    rx = ws.window(RX, 1)
    assert (rx.low_edge, rx.high_edge) == (-14.4, 0.5)
    assert math.isnan(rx.low_warning) and math.isnan(rx.high_warning)
    assert rx.source is WindowSource.PMD_TABLE
    assert rx.edge_source("low_edge") is WindowSource.PMD_TABLE
    tx = ws.window(TX, 1)
    assert (tx.low_edge, tx.high_edge) == (-8.2, 0.5)
    assert ws.window(Quantity.BIAS).source is WindowSource.NONE
    assert ws.pmd is CAT["10GBASE-LR"]


def test_pmd_found_inside_a_description():
    ws = resolve_windows(optic(pmd="SFP+ 10GBASE-LR 1310nm"), CAT)
    assert ws.window(RX).low_edge == -14.4


def test_unknown_pmd_is_noted_and_leaves_power_unjudged():
    ws = resolve_windows(optic(pmd="10GBASE-XYZ"), CAT)
    assert ws.window(RX).source is WindowSource.NONE
    assert "10GBASE-XYZ" in ws.window(RX).note


def test_both_judgements_keep_their_own_edges():
    # Vendor-style levels looser than the PMD: the standard gives the margin edges, the
    # module its own alarm and warning levels, and a note says by how much it is looser.
    t = Thresholds(high_alarm=2.5, low_alarm=-18.0, high_warning=0.5, low_warning=-16.0)
    rx = resolve_windows(optic(thresholds={RX: t}), CAT).window(RX, 1)
    # source: standards.md 10GBASE-LR Rx min -14.4 / overload +0.5 (IEEE 802.3 cl.52, verified)
    assert (rx.low_edge, rx.high_edge) == (-14.4, 0.5)
    assert (rx.low_alarm, rx.high_alarm, rx.low_warning, rx.high_warning) == (
        -18.0, 2.5, -16.0, 0.5)
    assert rx.sources == (WindowSource.PMD_TABLE, WindowSource.PMD_TABLE) + (
        WindowSource.MODULE,) * 4
    assert rx.source is WindowSource.MODULE
    # -18.0 is 3.6 dB looser than -14.4; +2.5 is 2.0 dB above +0.5
    assert "module looser than the standard" in rx.note
    assert "3.6 dB below the 10GBASE-LR minimum average receive power -14.4" in rx.note
    assert "2.0 dB above the 10GBASE-LR overload 0.5" in rx.note


def test_margin_edges_fall_back_to_module_alarms_without_a_pmd():
    t = Thresholds(high_alarm=2.5, low_alarm=-18.0)
    rx = resolve_windows(optic(pmd="", thresholds={RX: t}), CAT).window(RX, 1)
    assert (rx.low_edge, rx.high_edge, rx.low_alarm, rx.high_alarm) == (-18.0, 2.5, -18.0, 2.5)
    assert rx.sources[:4] == (WindowSource.MODULE,) * 4


def test_per_edge_mixing_site_and_standard():
    o = WindowOverride(quantity=RX, port="eth1/7", rx_sensitivity=-12.0)
    rx = resolve_windows(optic(), CAT, [o]).window(RX, 1)
    assert (rx.low_edge, rx.high_edge) == (-12.0, 0.5)
    assert rx.sources[:2] == (WindowSource.SITE, WindowSource.PMD_TABLE)
    assert rx.source is WindowSource.SITE  # the most authoritative contributor
    assert "sensitivity from site, overload from standard" in rx.note


def test_blank_module_thresholds_are_ignored():
    # A blank threshold area decodes as all zeros: low alarm == high alarm.
    t = Thresholds(high_alarm=0.0, low_alarm=0.0, high_warning=0.0, low_warning=0.0)
    rx = resolve_windows(optic(thresholds={RX: t}), CAT).window(RX, 1)
    assert rx.source is WindowSource.PMD_TABLE
    assert "module rx_power thresholds ignored" in rx.note


def test_non_finite_module_edges_are_treated_as_absent():
    t = Thresholds(high_alarm=float("nan"), low_alarm=float("-inf"))
    rx = resolve_windows(optic(thresholds={RX: t}), CAT).window(RX)
    assert rx.source is WindowSource.PMD_TABLE


def test_crossed_edges_keep_the_more_authoritative():
    # A module high alarm of -20 dBm lies below the standard's -14.4 dBm sensitivity: it
    # would flag every reading, so the module's level goes and the standard stays.
    rx = resolve_windows(optic(thresholds={RX: Thresholds(high_alarm=-20.0)}), CAT).window(RX)
    assert (rx.low_edge, rx.high_edge) == (-14.4, 0.5)
    assert math.isnan(rx.high_alarm)
    assert "high alarm -20 (module) dropped" in rx.note
    # Site edges crossing the standard's: the site wins.
    o = WindowOverride(quantity=RX, port="eth1/7", rx_overload=-16.0)
    rx = resolve_windows(optic(), CAT, [o]).window(RX)
    assert rx.high_edge == -16.0 and math.isnan(rx.low_edge)
    assert "sensitivity -14.4 (standard) dropped" in rx.note


def test_site_override_beats_module_and_standard_per_edge():
    t = Thresholds(high_alarm=2.5, low_alarm=-18.0, high_warning=0.5, low_warning=-16.0)
    o = WindowOverride(quantity=RX, part_number="hgl-10l-31", rx_sensitivity=-15.0)
    rx = resolve_windows(optic(thresholds={RX: t}), CAT, [o]).window(RX, 1)
    assert (rx.low_edge, rx.high_edge) == (-15.0, 0.5)
    assert (rx.low_alarm, rx.high_alarm) == (-15.0, 2.5)
    assert rx.sources[:4] == (WindowSource.SITE, WindowSource.PMD_TABLE, WindowSource.SITE,
                              WindowSource.MODULE)
    assert rx.source is WindowSource.SITE


def test_rx_override_falls_back_to_alarm_fields():
    o = WindowOverride(quantity=RX, port="eth1/7", low_alarm=-13.0, high_alarm=-2.0)
    rx = resolve_windows(optic(), CAT, [o]).window(RX)
    assert (rx.low_edge, rx.high_edge) == (-13.0, -2.0)


def test_port_override_beats_part_number_override():
    part = WindowOverride(quantity=RX, part_number="HGL-10L-31", rx_sensitivity=-12.0,
                          rx_overload=-1.0)
    port = WindowOverride(quantity=RX, device="harrow-agg-2", port="eth1/7",
                          rx_sensitivity=-13.0)
    for order in ([part, port], [port, part]):
        rx = resolve_windows(optic(), CAT, order).window(RX)
        assert rx.low_edge == -13.0  # port-level wins whatever the order
        assert rx.high_edge == -1.0  # the part override still supplies the edge it declares


def test_override_scope_must_match_every_given_field():
    other_device = WindowOverride(quantity=RX, device="harrow-edge-9", port="eth1/7",
                                  rx_sensitivity=-5.0)
    other_part = WindowOverride(quantity=RX, part_number="HGL-40L-31", rx_sensitivity=-6.0)
    rx = resolve_windows(optic(), CAT, [other_device, other_part]).window(RX)
    assert rx.source is WindowSource.PMD_TABLE


def test_site_wide_and_device_wide_overrides_rank_below_part_number():
    site = WindowOverride(quantity=RX, rx_sensitivity=-10.0)
    dev = WindowOverride(quantity=RX, device="HARROW-AGG-2", rx_sensitivity=-11.0)
    part = WindowOverride(quantity=RX, part_number="HGL-10L-31", rx_sensitivity=-12.0)
    assert resolve_windows(optic(), CAT, [site]).window(RX).low_edge == -10.0
    assert resolve_windows(optic(), CAT, [part, dev, site]).window(RX).low_edge == -12.0
    assert resolve_windows(optic(), CAT, [site, dev]).window(RX).low_edge == -11.0


def test_later_override_of_equal_scope_wins():
    a = WindowOverride(quantity=RX, port="eth1/7", rx_sensitivity=-12.0)
    b = WindowOverride(quantity=RX, port="eth1/7", rx_sensitivity=-11.0)
    assert resolve_windows(optic(), CAT, [a, b]).window(RX).low_edge == -11.0


def test_lane_specific_override():
    # source for the base edges: standards.md 100GBASE-LR4 row (from memory)
    lr4 = optic(pmd="100GBASE-LR4", lanes=4)
    o = WindowOverride(quantity=RX, port="eth1/7", lane=3, rx_sensitivity=-8.0)
    ws = resolve_windows(lr4, CAT, [o])
    assert ws.window(RX, 3).low_edge == -8.0
    assert ws.window(RX, 3).source is WindowSource.SITE
    assert ws.window(RX, 1).low_edge == -10.6
    assert ws.window(RX, 3).high_edge == 4.5


def test_oma_never_compared_with_average_power_pmd_edges():
    # 10GBASE-LR: OMA sensitivity -12.6 dBm (IEEE 802.3 cl.52, pmd_catalogue.csv, from
    # memory) is the standard's edge for an OMA-reporting module; no average edge at all.
    rx = resolve_windows(optic(rx_power_type="oma"), CAT).window(RX)
    assert rx.low_edge == -12.6 and math.isnan(rx.high_edge)
    assert rx.edge_source("low_edge") is WindowSource.PMD_TABLE
    assert "Rx judged in OMA" in rx.note
    # Tx power is average in every diagnostic map: the PMD Tx edges still apply.
    assert resolve_windows(optic(rx_power_type="OMA"), CAT).window(TX).low_edge == -8.2
    # A PMD whose table row states no OMA sensitivity: no standard Rx edge, and why.
    lx = resolve_windows(optic(pmd="1000BASE-LX", rx_power_type="oma"), CAT).window(RX)
    assert lx.source is WindowSource.NONE and OMA_NOTE in lx.note


def test_oma_uses_module_thresholds_in_the_same_terms():
    t = Thresholds(high_alarm=1.0, low_alarm=-13.0)
    rx = resolve_windows(optic(rx_power_type="oma", thresholds={RX: t}), CAT).window(RX)
    assert (rx.low_edge, rx.high_edge) == (-12.6, 1.0)
    assert (rx.low_alarm, rx.high_alarm) == (-13.0, 1.0)
    assert rx.sources[:2] == (WindowSource.PMD_TABLE, WindowSource.MODULE)
    assert OMA_NOTE not in rx.note


def test_oma_with_one_declared_edge_says_why_the_other_is_missing():
    t = Thresholds(high_alarm=1.0)
    rx = resolve_windows(optic(pmd="1000BASE-LX", rx_power_type="oma", thresholds={RX: t}),
                         CAT).window(RX)
    assert math.isnan(rx.low_edge) and rx.high_edge == 1.0
    assert OMA_NOTE in rx.note


def test_average_rows_carry_the_derived_oma_equivalent_beside_them():
    # P_avg = OMA (r+1) / (2 (r-1)) at the minimum extinction ratio r (IEEE 802.3 52.9
    # definitions, from memory): -12.6 dBm OMA at 3.5 dB is about -11.4 dBm average,
    # 3 dB above the -14.4 dBm average edge that stays the judged one.
    rx = resolve_windows(optic(), CAT).window(RX)
    assert rx.low_edge == -14.4
    assert rx.oma_equivalent_dbm == pytest.approx(-11.44, abs=0.01)


def test_oma_with_site_override():
    o = WindowOverride(quantity=RX, part_number="HGL-10L-31", rx_sensitivity=-12.0,
                       rx_overload=0.0)
    rx = resolve_windows(optic(rx_power_type="oma"), CAT, [o]).window(RX)
    assert (rx.low_edge, rx.high_edge, rx.source) == (-12.0, 0.0, WindowSource.SITE)


def test_practice_fallback_for_temperature_and_supply():
    # source: standards.md "Rules of thumb": commercial 0-70 C, Vcc 3.3 V +-5 % (practice)
    ws = resolve_windows(optic(), CAT)
    temp = ws.window(Quantity.TEMPERATURE)
    assert (temp.low_warning, temp.high_warning) == (0.0, 70.0)
    assert math.isnan(temp.low_edge) and math.isnan(temp.high_edge)  # never an alarm
    assert temp.source is WindowSource.PRACTICE
    vcc = ws.window(Quantity.SUPPLY)
    assert vcc.low_warning == pytest.approx(3.135) and vcc.high_warning == pytest.approx(3.465)
    assert "common practice" in vcc.note


def test_module_temperature_replaces_practice_entirely():
    # An industrial part declares -40..85: practice (0..70) must not leak into its warnings.
    t = Thresholds(high_alarm=90.0, low_alarm=-45.0)
    temp = resolve_windows(optic(thresholds={Quantity.TEMPERATURE: t}), CAT).window(
        Quantity.TEMPERATURE)
    assert (temp.low_edge, temp.high_edge) == (-45.0, 90.0)
    assert math.isnan(temp.low_warning) and math.isnan(temp.high_warning)
    assert temp.source is WindowSource.MODULE


def test_site_beats_module_for_bias():
    t = Thresholds(high_alarm=15.0, low_alarm=2.0)
    o = WindowOverride(quantity=Quantity.BIAS, part_number="HGL-10L-31", high_warning=11.0)
    bias = resolve_windows(optic(thresholds={Quantity.BIAS: t}), CAT, [o]).window(Quantity.BIAS)
    assert (bias.low_edge, bias.high_edge, bias.high_warning) == (2.0, 15.0, 11.0)
    assert bias.edge_source("high_warning") is WindowSource.SITE
    assert bias.edge_source("high_edge") is WindowSource.MODULE


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        (dict(quantity=TX, rx_overload=0.0), "only to rx_power"),
        (dict(quantity=RX, port="eth1/7", rx_sensitivity=-1.0, rx_overload=-3.0), "not below"),
        (dict(quantity=Quantity.BIAS, high_alarm=float("nan")), "high_alarm is not a finite"),
    ],
)
def test_bad_overrides_are_refused_with_their_scope(kwargs, message):
    with pytest.raises(ValueError, match=message):
        WindowOverride(**kwargs)


def test_resolver_shares_windows_between_alike_optics():
    o = WindowOverride(quantity=RX, port="eth1/9", rx_sensitivity=-12.0)
    resolver = WindowResolver(CAT, [o])
    a = resolver(optic(port="eth1/1", serial="A"))
    b = resolver(optic(port="eth1/2", serial="B"))
    c = resolver(optic(port="eth1/9", serial="C"))
    assert a is b
    assert c is not a and c.window(RX).low_edge == -12.0
    assert resolver(optic(port="eth1/3", rx_power_type="oma")) is not a


def test_override_index_matching_order():
    index = OverrideIndex([
        WindowOverride(quantity=RX, port="eth1/7", rx_sensitivity=-1.0),
        WindowOverride(quantity=RX, rx_sensitivity=-2.0),
        WindowOverride(quantity=RX, part_number="HGL-10L-31", rx_sensitivity=-3.0),
    ])
    assert index.matching(optic()) == (1, 2, 0)  # least specific first


def test_the_plants_fibre_picks_the_pmd_row():
    # 1000BASE-LX launches at least -11.0 dBm on single-mode and -11.5 dBm on multimode
    # fibre (IEEE 802.3 Table 38-7 via standards.md, verified).
    lx = optic(pmd="1000BASE-LX")
    assert resolve_windows(lx, CAT).window(TX).low_edge == -11.0
    assert resolve_windows(lx, CAT, fibre="OM3").window(TX).low_edge == -11.5
    resolver = WindowResolver(CAT, fibre_of={(lx.device, lx.port): "OM2"})
    assert resolver(lx).window(TX).low_edge == -11.5
