"""Hand-built ReadingBatch and Assessment objects for rule tests.

The lifecycle and advice tests judge what a lifecycle does with a given row condition,
so they build the Assessment directly (every array aligned with the batch) instead of
running the assessment pipeline. Names are of the fictional Quillmoor Lab.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from lightwarden.collector.readings import (
    BatchBuilder,
    OpticIdentity,
    Quantity,
    ReadingBatch,
    ReadingStatus,
)
from lightwarden.rules.findings import Assessment, Condition, WindowSource

DEVICE = "hgl-core-1"
PORT = "sfp7"

# 10GBASE-ER per-lane window, dBm: overload -1.0, Rx min (avg) -15.8.
# source: standards.md IEEE 802.3 cl.52 table (from memory)
ER_OVERLOAD = -1.0
ER_SENSITIVITY = -15.8


def _column(value: float | Sequence[float] | None, n: int) -> np.ndarray:
    if value is None:
        return np.full(n, math.nan)
    if isinstance(value, int | float):
        return np.full(n, float(value))
    out = np.asarray(value, dtype=np.float64)
    if out.shape != (n,):
        raise ValueError(f"test helper: column has {out.shape} rows, batch has {n}")
    return out


def build_assessment(
    batch: ReadingBatch,
    condition: Sequence[Condition],
    *,
    low_edge: float | Sequence[float] | None = None,
    high_edge: float | Sequence[float] | None = None,
    low_warning: float | Sequence[float] | None = None,
    high_warning: float | Sequence[float] | None = None,
    window_source: WindowSource = WindowSource.PMD_TABLE,
) -> Assessment:
    """An Assessment aligned with ``batch``; margins computed for optical power rows."""
    n = len(batch)
    cond = np.asarray([int(c) for c in condition], dtype=np.int8)
    if cond.shape != (n,):
        raise ValueError(f"test helper: {cond.size} conditions for {n} rows")
    low = _column(low_edge, n)
    high = _column(high_edge, n)
    power = np.isin(batch.quantity, [int(Quantity.RX_POWER), int(Quantity.TX_POWER)])
    severity = np.array([Condition(int(c)).severity for c in cond], dtype=np.int8)
    worst = np.zeros(len(batch.optics), dtype=np.int8)
    for optic in range(len(batch.optics)):
        rows = np.flatnonzero(batch.optic == optic)
        if rows.size:
            worst[optic] = cond[rows[np.argmax(severity[rows])]]
    return Assessment(
        batch=batch,
        low_edge=low,
        high_edge=high,
        low_warning=_column(low_warning, n),
        high_warning=_column(high_warning, n),
        window_source=np.full(n, int(window_source), dtype=np.int8),
        margin_low_db=np.where(power, batch.value - low, math.nan),
        margin_high_db=np.where(power, high - batch.value, math.nan),
        instant=cond.copy(),
        condition=cond,
        optic_condition=worst,
    )


def rx_assessment(
    rx_dbm: float | None,
    condition: Condition,
    now: float,
    *,
    device: str = DEVICE,
    port: str = PORT,
    lane: int = 1,
    overload: float = ER_OVERLOAD,
    sensitivity: float = ER_SENSITIVITY,
) -> Assessment:
    """One optic with one Rx power row (``None`` = no light) judged as ``condition``."""
    builder = BatchBuilder(device)
    optic = builder.add_optic(
        OpticIdentity(device=device, port=port, pmd="10GBASE-ER", wavelength_nm=1550.0)
    )
    if rx_dbm is None:
        builder.add(optic, lane, Quantity.RX_POWER, None, ReadingStatus.NO_LIGHT, "no light")
    else:
        builder.add(optic, lane, Quantity.RX_POWER, rx_dbm)
    return build_assessment(
        builder.build(now), [condition], low_edge=sensitivity, high_edge=overload
    )


def empty_assessment(now: float, *, device: str = DEVICE) -> Assessment:
    """A device that answered but reported no optics at all."""
    return build_assessment(BatchBuilder(device).build(now), [])
