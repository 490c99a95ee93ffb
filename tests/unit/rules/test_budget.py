"""Planning a link: both directions against the budget, with the pad rule of live links.

Sources beside each check: ITU-T G.652 Appendix I loss sum and the worked example in
standards.md "Fibre plant" (10 km x 0.4 dB/km + 2 connector pairs x 0.75 + 2 splices x
0.3 = 6.1 dB, computed); IEEE 802.3 power budgets (10GBASE-LR 6.2 dB computed from the
cl.52 rows, verified; 1000BASE-LX 8.0 dB on single-mode fibre, Table 38-7, verified via
published restatements); planning coefficients (standards.md, practice).
"""

from __future__ import annotations

import pytest

from lightwarden.rules.budget import SpanPlan, plan_link
from lightwarden.rules.catalogue import default_catalogue
from lightwarden.rules.pads import Verdict
from lightwarden.rules.spanloss import PlanningCoefficients

CAT = default_catalogue()
WORKED = PlanningCoefficients(connector_db=0.75, splice_db=0.3)


def test_worked_example_loss_and_lr_budget():
    plan = plan_link(CAT["10GBASE-LR"], CAT["10GBASE-LR"],
                     SpanPlan(10.0, "OS2", connectors=2, splices=2), coefficients=WORKED)
    assert plan.engineered_loss_db == pytest.approx(6.1)
    ab, ba = plan.directions
    assert (ab.from_end, ab.to_end, ba.from_end, ba.to_end) == ("a", "b", "b", "a")
    assert ab.power_budget_db == pytest.approx(6.2)
    # Tx -8.2..+0.5 less 6.1 dB: Rx -14.3..-5.6 dBm, 0.1 dB above the -14.4 sensitivity:
    # the link closes but misses the 3 dB target
    assert (ab.rx_min_dbm, ab.rx_max_dbm) == pytest.approx((-14.3, -5.6))
    assert ab.verdict is Verdict.SHORT and ab.pad_db is None
    assert plan.verdict is Verdict.SHORT


def test_lx_power_budget_depends_on_the_fibre():
    for fibre, budget in (("OS2", 8.0), ("OM3", 7.5)):
        lx = CAT.lookup("1000BASE-LX", fibre=fibre)
        assert lx is not None
        plan = plan_link(lx, lx, SpanPlan(0.3, fibre))
        assert plan.directions[0].power_budget_db == pytest.approx(budget), fibre


def test_short_er_span_needs_a_pad_per_direction():
    # 10GBASE-ER into 2 km: Tx -4.7..+4.0 (cl.52, from memory) less 2 x 0.25 + 2 x 0.5 =
    # 1.5 dB: -6.2..+2.5 dBm. Needs >= 2.5 - (-1.0 - 1.0 - 0.5) = 5.0 dB; keeps <= -6.2 -
    # (-15.8 + 3) = 6.6 dB: 5 dB.
    er = CAT["10GBASE-ER"]
    plan = plan_link(er, er, SpanPlan(2.0, "OS2"))
    for d in plan.directions:
        assert d.loss_db == pytest.approx(1.5)
        assert (d.verdict, d.pad_db) == (Verdict.PAD, 5.0)
    # a 5 dB pad recorded at B's receiver counts in the a -> b direction only
    plan = plan_link(er, er, SpanPlan(2.0, "OS2", pad_b_db=5.0))
    ab, ba = plan.directions
    assert ab.loss_db == pytest.approx(6.5) and ab.verdict is Verdict.OK
    assert ba.loss_db == pytest.approx(1.5) and ba.pad_db == 5.0


def test_reach_and_mismatch_are_noted_and_bad_input_named():
    plan = plan_link(CAT["10GBASE-LR"], CAT["10GBASE-ER"], SpanPlan(12.0, "OS2"))
    assert any("different PMDs" in n for n in plan.notes)
    assert any("beyond 10GBASE-LR's reach" in n for n in plan.notes)
    with pytest.raises(ValueError, match="length_km"):
        SpanPlan(-1.0)
    with pytest.raises(ValueError, match="connectors"):
        SpanPlan(1.0, connectors=-2)
    with pytest.raises(ValueError, match="fibre 'OS9'"):
        SpanPlan(1.0, "OS9")
