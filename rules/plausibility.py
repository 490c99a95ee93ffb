"""Physically plausible ranges: a value outside its quantity's range is a broken sensor,
a decoding fault or a garbled row, not a reading, and is never judged.

Such a row's status becomes INVALID (its condition then is ``unknown``), its value is
cleared and a note keeps what was reported and the range.

The ranges are common practice, chosen wide. Compare what the SFF-8472 monitor encoding
can represent (standards.md, verified): power in 0.1 uW steps up to 6.5535 mW (about -40
to +8.2 dBm), bias in 2 uA steps up to 131 mA, supply in 100 uV steps up to 6.5535 V,
temperature signed in 1/256 C (-128 to +128 C). Only two corners of that fall outside:
temperature below -60 C and supply above 6 V, where no working module is (a 3.3 V module
is specified to a few tenths of a volt around 3.3 V, from memory); a command line that
prints values beyond these ranges has garbled its output.

Pure and columnar: one pass over a batch, nothing read but the batch.
"""

from __future__ import annotations

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch, ReadingStatus

#: (lowest, highest) plausible value per quantity, in the batch's units; common practice
PLAUSIBLE: dict[Quantity, tuple[float, float]] = {
    Quantity.RX_POWER: (-50.0, 30.0),  # dBm
    Quantity.TX_POWER: (-50.0, 30.0),  # dBm
    Quantity.BIAS: (0.0, 500.0),  # mA
    Quantity.TEMPERATURE: (-60.0, 150.0),  # degrees C
    Quantity.SUPPLY: (0.0, 6.0),  # V
}

_LOW = np.full(max(Quantity) + 1, -np.inf)
_HIGH = np.full(max(Quantity) + 1, np.inf)
for _q, (_lo, _hi) in PLAUSIBLE.items():
    _LOW[_q], _HIGH[_q] = _lo, _hi
_LOW.flags.writeable = _HIGH.flags.writeable = False


def flag_implausible(batch: ReadingBatch) -> int:
    """Mark every OK row outside its plausible range INVALID, in place; returns how many."""
    if len(batch) == 0:
        return 0
    q = batch.quantity.astype(np.intp)
    v = batch.value
    ok = batch.status == int(ReadingStatus.OK)
    with np.errstate(invalid="ignore"):
        bad = ok & ((v < _LOW[q]) | (v > _HIGH[q]))
    rows = np.flatnonzero(bad)
    for i in map(int, rows):
        quantity = Quantity(int(q[i]))
        lo, hi = PLAUSIBLE[quantity]
        unit = quantity.unit
        batch.notes[i] = (f"implausible {quantity.label} {float(v[i]):g} {unit} reported "
                          f"(plausible {lo:g}..{hi:g} {unit}); not judged")
    batch.status[rows] = int(ReadingStatus.INVALID)
    batch.value[rows] = np.nan
    return int(rows.size)
