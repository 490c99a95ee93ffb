"""Span loss: engineered budget (ITU-T G.652 App. I form), measured loss (consistency of the
ends: test_consistency.py)."""

from __future__ import annotations

import numpy as np
import pytest

from lightwarden.collector.readings import (
    BatchBuilder,
    OpticIdentity,
    Quantity,
    ReadingStatus,
)
from lightwarden.rules.spanloss import (
    BELOW_BUDGET,
    EXCESS_LOSS,
    NOT_ENOUGH,
    WITHIN_BUDGET,
    PlanningCoefficients,
    PlantSpan,
    engineered_loss_db,
    fibre_db_per_km,
    judge_span_loss,
    link_attenuation_db,
    measure_span_loss,
    span_loss_growth,
)

T0 = 1_800_000_000.0


def test_worked_loss_budget_example():
    # source: standards.md "Fibre plant" worked example, computed from the ITU-T G.652
    # Appendix I form (verified) with TIA-568 maxima: connector pair 0.75 dB (verified),
    # splice 0.3 dB (from memory): 10 km x 0.4 + 2 x 0.75 + 2 x 0.3 = 6.1 dB.
    assert link_attenuation_db(10.0, 0.4, 2, 0.75, 2, 0.3) == pytest.approx(6.1)


def test_g652_typical_attenuation_at_1550():
    # source: ITU-T G.652 Appendix I, 0.275 dB/km at 1530-1565 nm (standards.md, verified):
    # 40 km of fibre alone is 11.0 dB.
    assert link_attenuation_db(40.0, 0.275, 0, 0.0, 0, 0.0) == pytest.approx(11.0)
    coeffs = PlanningCoefficients(sm_1550_db_per_km=0.275, connector_db=0.0, splice_db=0.0)
    span = PlantSpan("hgl-a", "sfp1", "hgl-b", "sfp1", 40.0, "OS2", 1550.0, 0, 0)
    assert engineered_loss_db(span, coeffs) == pytest.approx(11.0)


def test_planning_coefficients_by_band():
    # source: standards.md "Fibre plant" planning values (common practice): SM 0.4 dB/km
    # at 1310, 0.25 at 1550, MM 3 dB/km at 850, connector 0.5 dB, fusion splice 0.1 dB.
    assert fibre_db_per_km("OS2", 1310.0) == 0.4
    assert fibre_db_per_km("os2", 1550.0) == 0.25
    assert fibre_db_per_km("OM4", 850.0) == 3.0
    lr = PlantSpan("hgl-a", "sfp1", "hgl-b", "sfp2", 10.0, "OS2", 1310.0, connectors=2, splices=2)
    assert engineered_loss_db(lr) == pytest.approx(4.0 + 1.0 + 0.2)
    sr = PlantSpan("hgl-a", "sfp3", "hgl-b", "sfp4", 0.3, "OM4", 850.0, connectors=2)
    assert engineered_loss_db(sr) == pytest.approx(0.9 + 1.0)


def test_a_pad_counts_in_its_own_direction_only():
    # A 5 dB pad at B's receiver (pad_b_db) lowers what B receives, not what A receives: a
    # pad of N dB lowers Rx by N dB (standards.md "dB arithmetic", common practice).
    padded = PlantSpan("hgl-a", "sfp5", "hgl-c", "sfp1", 40.0, "OS2", 1550.0, 4, 0,
                       pad_b_db=5.0)
    assert engineered_loss_db(padded, direction="a->b") == pytest.approx(10.0 + 2.0 + 5.0)
    assert engineered_loss_db(padded, direction="b->a") == pytest.approx(10.0 + 2.0)
    with pytest.raises(ValueError, match="direction"):
        engineered_loss_db(padded, direction="sideways")


def test_bad_plant_records_name_the_span():
    span = PlantSpan("hgl-a", "sfp1", "hgl-b", "sfp1", 10.0, "copper", 1310.0)
    with pytest.raises(ValueError, match=r"hgl-a sfp1 -> hgl-b sfp1: unknown fibre type 'copper'"):
        engineered_loss_db(span)
    span = PlantSpan("hgl-a", "sfp1", "hgl-b", "sfp1", -2.0, "OS2", 1310.0)
    with pytest.raises(ValueError, match="length_km"):
        engineered_loss_db(span)


def _two_ends(tx_mw_a: list[float], rx_b: list[float | None]):
    a = BatchBuilder("hgl-a")
    oa = a.add_optic(OpticIdentity(device="hgl-a", port="sfp1", lanes=len(tx_mw_a)))
    for lane, mw in enumerate(tx_mw_a, start=1):
        a.add_power_mw(oa, lane, Quantity.TX_POWER, mw)
    b = BatchBuilder("hgl-b")
    ob = b.add_optic(OpticIdentity(device="hgl-b", port="sfp9", lanes=len(rx_b)))
    other = b.add_optic(OpticIdentity(device="hgl-b", port="sfp10"))
    b.add(other, 1, Quantity.RX_POWER, -30.0)  # another port: must not be picked up
    for lane, dbm in enumerate(rx_b, start=1):
        if dbm is None:
            b.add(ob, lane, Quantity.RX_POWER, None, ReadingStatus.NO_LIGHT)
        else:
            b.add(ob, lane, Quantity.RX_POWER, dbm)
    return a.build(T0), b.build(T0 + 2)


SPAN = PlantSpan("hgl-a", "sfp1", "hgl-b", "sfp9", 10.0, "OS2", 1310.0, 2, 2)


def test_measured_loss_is_tx_minus_rx_per_lane():
    # source: standards.md "span loss from diagnostics": loss A->B = Tx(A) - Rx(B).
    # Tx 1.000 mW = 0.000 dBm (SFF-8472 worked decode, verified); 0.5 mW = -3.010 dBm.
    tx_batch, rx_batch = _two_ends([1.0, 0.5, 1.0], [-6.1, -9.0, None])
    s = measure_span_loss(SPAN, tx_batch, rx_batch)
    assert s.direction == "a->b" and s.taken_at == T0 + 2
    assert s.lanes.tolist() == [1, 2, 3]
    assert s.loss_db[0] == pytest.approx(6.1)
    assert s.loss_db[1] == pytest.approx(-3.010 + 9.0, abs=1e-3)
    assert np.isnan(s.loss_db[2])  # no light at B: no loss figure, never a number


def test_measure_refuses_batches_from_the_wrong_devices():
    tx_batch, rx_batch = _two_ends([1.0], [-6.0])
    with pytest.raises(ValueError, match="expected batches from hgl-b and hgl-a"):
        measure_span_loss(SPAN, tx_batch, rx_batch, "b->a")
    with pytest.raises(ValueError, match="direction"):
        measure_span_loss(SPAN, tx_batch, rx_batch, "sideways")


def test_judging_uses_the_median_not_one_sample():
    # Engineered 6.1 dB (worked example above); tolerance 1.5 dB.
    samples = np.array([6.3, 6.0, 6.4, 12.0, 6.2, 6.1])  # one wild reading
    v = judge_span_loss(samples, 6.1)
    assert v.verdict == WITHIN_BUDGET and v.measured_db == pytest.approx(6.25)
    hot = judge_span_loss(samples + 2.5, 6.1)
    assert hot.verdict == EXCESS_LOSS and hot.excess_db == pytest.approx(2.65)
    low = judge_span_loss(samples - 2.0, 6.1)
    assert low.verdict == BELOW_BUDGET
    few = judge_span_loss(np.array([9.0, np.nan, 9.1]), 6.1)
    assert few.verdict == NOT_ENOUGH and few.samples == 2


def test_growth_against_the_span_baseline():
    base = np.array([6.2, 6.1, 6.3, 6.2])
    recent = np.array([7.8, 7.6, 7.7, np.nan])
    assert span_loss_growth(base, recent) == pytest.approx(1.5)
    assert span_loss_growth(base, recent[:2]) is None


def test_a_span_wavelength_is_never_assumed_silently():
    from lightwarden.rules.catalogue import default_catalogue
    from lightwarden.rules.plant import build_plant

    class Rec:
        a, b, km, fibre, connectors, splices = "x sfp1", "y sfp1", 1.0, "OS2", 2, 0
        pad_a_db = pad_b_db = 0.0
        wavelength_nm = None
        mode_conditioning = False

    cat = default_catalogue()
    (assumed,) = build_plant([Rec()], cat).spans
    assert (assumed.wavelength_nm, assumed.wavelength_from) == (1310.0, "assumed")
    (from_pmd,) = build_plant([Rec()], cat, {("x", "sfp1"): "10GBASE-ER"}).spans
    assert from_pmd.wavelength_from == "pmd" and from_pmd.wavelength_nm > 1500
