"""Implausible values are marked invalid and never judged (condition unknown, noted).

Ranges are common practice (rules/plausibility.py). Values inside them that the
SFF-8472 monitor encoding can represent at its limits come from standards.md
(verified): Tx/Rx power 0.1 uW to 6.5535 mW (about -40 to +8.2 dBm), bias up to
131.07 mA (65535 x 2 uA), temperature -128 to +128 C in 1/256 C, supply 100 uV LSB.
The 10GBASE-LR window is IEEE 802.3 cl.52 (standards.md, verified).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity, ReadingStatus
from lightwarden.collector.units import mw_to_dbm
from lightwarden.rules.assess import assess
from lightwarden.rules.catalogue import default_catalogue
from lightwarden.rules.findings import Condition
from lightwarden.rules.plausibility import PLAUSIBLE, flag_implausible
from lightwarden.rules.windows import WindowResolver

Q = Quantity
RESOLVER = WindowResolver(default_catalogue())


def one(quantity: Quantity, value: float, lane: int = 1):
    b = BatchBuilder("qm-core-a")
    o = b.add_optic(OpticIdentity("qm-core-a", "sfp1", pmd="10GBASE-LR", admin_up=True))
    b.add(o, 0 if quantity in (Q.TEMPERATURE, Q.SUPPLY) else lane, quantity, value)
    return b.build(1000.0)


@pytest.mark.parametrize(("quantity", "value"), [
    (Q.TEMPERATURE, 99_999_999.0),  # the values a fuzzed device gave
    (Q.BIAS, 1_000_000.0),  # +1000 A in mA
    (Q.BIAS, -1_000_000.0),
    (Q.BIAS, -0.5),  # negative bias
    (Q.SUPPLY, -3.3),  # negative supply
    (Q.SUPPLY, 12.0),
    (Q.RX_POWER, 50.0),
    (Q.RX_POWER, 99_999.0),
    (Q.RX_POWER, -60.0),
    (Q.TX_POWER, 31.0),
    (Q.TEMPERATURE, -80.0),
])
def test_implausible_values_are_invalid_and_unknown_with_a_note(quantity, value):
    batch = one(quantity, value)
    assert flag_implausible(batch) == 1
    assert batch.status[0] == int(ReadingStatus.INVALID)
    assert math.isnan(batch.value[0])
    note = batch.notes[0]
    assert "implausible" in note and f"{value:g}" in note and "not judged" in note
    a = assess(batch, resolver=RESOLVER, now=1000.0)
    assert Condition(int(a.condition[0])) is Condition.UNKNOWN


@pytest.mark.parametrize(("quantity", "value"), [
    (Q.RX_POWER, mw_to_dbm(0.0001)),  # SFF-8472 smallest step, 0.1 uW = -40 dBm
    (Q.RX_POWER, mw_to_dbm(6.5535)),  # SFF-8472 largest, about +8.2 dBm
    (Q.RX_POWER, -14.4),  # 10GBASE-LR sensitivity (IEEE 802.3 cl.52)
    (Q.BIAS, 65535 * 0.002),  # SFF-8472 largest bias, 131.07 mA
    (Q.BIAS, 0.0),  # laser off
    (Q.TEMPERATURE, -40.0),  # industrial range low end (common practice)
    (Q.TEMPERATURE, 127.99),  # SFF-8472 largest temperature
    (Q.SUPPLY, 3.3),
])
def test_plausible_values_are_judged_as_usual(quantity, value):
    batch = one(quantity, value)
    assert flag_implausible(batch) == 0
    assert batch.status[0] == int(ReadingStatus.OK)
    assert batch.value[0] == pytest.approx(value)


def test_edges_are_inclusive_and_only_the_bad_rows_change():
    b = BatchBuilder("qm-core-a")
    o = b.add_optic(OpticIdentity("qm-core-a", "sfp1"))
    for q, (lo, hi) in PLAUSIBLE.items():
        lane = 0 if q in (Q.TEMPERATURE, Q.SUPPLY) else 1
        b.add(o, lane, q, lo)
        b.add(o, lane, q, hi)
        b.add(o, lane, q, hi + 1.0)
    b.add(o, 1, Q.RX_POWER, None, ReadingStatus.NO_LIGHT, "no light")
    batch = b.build(1.0)
    assert flag_implausible(batch) == len(PLAUSIBLE)
    status = batch.status.reshape(-1)[:-1].reshape(len(PLAUSIBLE), 3)
    assert (status[:, :2] == int(ReadingStatus.OK)).all()
    assert (status[:, 2] == int(ReadingStatus.INVALID)).all()
    assert batch.status[-1] == int(ReadingStatus.NO_LIGHT)
    assert np.isnan(batch.value[2::3][: len(PLAUSIBLE)]).all()
