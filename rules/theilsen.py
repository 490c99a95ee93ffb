"""Theil–Sen slope with Sen's (1968) confidence interval, in numpy.

The median of all pairwise slopes: a straight line that a few glitch readings (a module
read mid-update, a reseated patch cord) cannot drag, unlike least squares. The interval
is the distribution-free one of Sen (1968), eq. 2.6, from Kendall's tau with ties in
time or value accounted for; scipy.stats.theilslopes computes the same thing and is the
reference the tests compare against (scipy itself is only a test dependency).

Cost is O(n²) in time and memory (every pair), so callers hand it the hourly or daily
tier, not raw samples: 90 daily points are 4005 pairs, 720 hourly points 258 840.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

#: beyond this many points the pair matrix costs more than a trend is worth
MAX_POINTS = 2000


@dataclass(slots=True, frozen=True)
class SlopeFit:
    """A robust straight line: value = intercept + slope * t, with a slope interval."""

    slope: float  # per unit of t
    low: float  # lower end of the slope's confidence interval
    high: float
    intercept: float  # value at t = 0 (median(v) - slope * median(t))
    confidence: float
    points: int

    def value_at(self, t: float) -> float:
        return self.intercept + self.slope * t

    @property
    def excludes_zero(self) -> bool:
        """True when the data say the line moves (the interval lies on one side of 0)."""
        return (self.low > 0.0 and self.high > 0.0) or (self.low < 0.0 and self.high < 0.0)


def _tie_term(x: np.ndarray) -> float:
    """Sum of k(k-1)(2k+5) over groups of k equal values (Sen 1968, eq. 2.6)."""
    _, counts = np.unique(x, return_counts=True)
    k = counts[counts > 1].astype(np.float64)
    return float(np.sum(k * (k - 1.0) * (2.0 * k + 5.0)))


def theil_sen(t: np.ndarray, v: np.ndarray, confidence: float = 0.95) -> SlopeFit | None:
    """Fit one line; None when fewer than two distinct times (no slope exists).

    ``t`` and ``v`` are finite float arrays of equal length (the caller drops NaN).
    Shift ``t`` to a local origin (e.g. days since the first point) before calling: the
    intercept is at t = 0, and epoch seconds would cost precision there.
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"theil_sen: confidence must be inside (0, 1), got {confidence}")
    x = np.asarray(t, dtype=np.float64).ravel()
    y = np.asarray(v, dtype=np.float64).ravel()
    if x.shape != y.shape:
        raise ValueError(f"theil_sen: t and v differ in length ({x.size} vs {y.size})")
    n = int(x.size)
    if n > MAX_POINTS:
        raise ValueError(f"theil_sen: {n} points; downsample to at most {MAX_POINTS}")
    if n < 2:
        return None
    i, j = np.triu_indices(n, k=1)
    dx = x[j] - x[i]
    dy = y[j] - y[i]
    neg = dx < 0.0  # pairs ordered so that dx > 0, as the estimator defines them
    dx = np.where(neg, -dx, dx)
    dy = np.where(neg, -dy, dy)
    keep = dx > 0.0
    if not keep.any():
        return None
    slopes = np.sort(dy[keep] / dx[keep])
    med = float(np.median(slopes))
    intercept = float(np.median(y)) - med * float(np.median(x))
    z = -NormalDist().inv_cdf((1.0 - confidence) / 2.0)  # 1.96 for 95 %
    nt = int(slopes.size)
    var = (n * (n - 1) * (2 * n + 5) - _tie_term(x) - _tie_term(y)) / 18.0
    sigma = math.sqrt(var) if var > 0.0 else 0.0
    # np.round (half to even) as Sen's indices are rounded in the reference implementation
    hi = min(int(np.round((nt + z * sigma) / 2.0)), nt - 1)
    lo = max(int(np.round((nt - z * sigma) / 2.0)) - 1, 0)
    return SlopeFit(slope=med, low=float(slopes[lo]), high=float(slopes[hi]),
                    intercept=intercept, confidence=confidence, points=n)
