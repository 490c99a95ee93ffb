"""Steps told from slides: where a series jumps (a connector, a patch, a swap) rather than drifts.

Two documented methods, both plain numpy:

1. **Hampel filter** (rolling median ± k·MAD, Hampel 1974): single glitch readings are
   marked and left out, so one bad poll neither makes nor hides a step. A real step
   survives it, since from the step's own sample on most of the window is already at
   the new level.
2. **Binary segmentation with a piecewise-linear cost**: the split that most lowers the
   summed squared residual of one straight line per side. Because each side has its own
   line, a steady slide is fitted just as well without a split, so the split's gain is
   small and its jump (the gap between the two lines at the split) near zero; a step
   leaves a jump of its own size. A split is kept when the jump is at least
   ``min_step`` and several times the noise (robust σ from the differences of
   neighbouring samples) and the gain beats a BIC-like penalty; then each side is
   searched again.

Why not a change-point library: the one that fits (ruptures) offers these costs but is
a compiled dependency for some twenty lines of cumulative sums, and rules/ keeps to
numpy; the method here is small enough to read and test in full.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(slots=True, frozen=True)
class Step:
    """A jump in level between two samples."""

    index: int  # first sample after the step
    t: float  # time of that sample
    jump: float  # level after minus level before, at the step (dB for power)


@dataclass(slots=True, frozen=True)
class StepLimits:
    """When a jump counts as a step.

    0.5 dB is our choice: above the sample-to-sample repeatability of DDM power readings
    (typically a few tenths of a dB, common practice) and below the 0.75 dB a mated
    connector pair may lose (TIA-568 connector allowance, from memory), so a dirty or
    reseated connector shows.
    """

    min_step: float = 0.5
    noise_multiple: float = 5.0  # jump at least this many robust σ of the noise
    min_segment: int = 4  # samples each side of a step
    max_steps: int = 8
    hampel_half_window: int = 3
    hampel_k: float = 5.0


DEFAULT_STEP_LIMITS = StepLimits()

_MAD_TO_SIGMA = 1.4826  # σ of a normal distribution per unit of median absolute deviation


def noise_sigma(v: np.ndarray) -> float:
    """Robust σ of the noise: MAD of first differences, / √2 (a difference holds two)."""
    if v.size < 3:
        return 0.0
    d = np.diff(v)
    return float(_MAD_TO_SIGMA * np.median(np.abs(d - np.median(d))) / math.sqrt(2.0))


def hampel_outliers(v: np.ndarray, half_window: int = 3, k: float = 5.0,
                    floor: float = 0.0) -> np.ndarray:
    """Mask of glitch samples: further than k robust σ from their window's median.

    ``floor`` is the least distance that counts (in the value's unit), so readings on a
    perfectly quiet line are not marked for a 0.01 dB wobble.
    """
    n = int(v.size)
    out = np.zeros(n, dtype=bool)
    if n < 2 * half_window + 1:
        return out
    w = 2 * half_window + 1
    windows = np.lib.stride_tricks.sliding_window_view(v, w)
    med = np.median(windows, axis=1)
    mad = np.median(np.abs(windows - med[:, None]), axis=1)
    centre = np.arange(half_window, n - half_window)
    dev = np.abs(v[centre] - med)
    out[centre] = dev > np.maximum(k * _MAD_TO_SIGMA * mad, floor)
    return out


class _Prefix:
    """Cumulative sums that give any segment's least-squares line cost in O(1)."""

    __slots__ = ("s1", "st", "stt", "stv", "sv", "svv")

    def __init__(self, t: np.ndarray, v: np.ndarray):
        z = np.zeros(1)
        self.s1 = np.concatenate([z, np.cumsum(np.ones_like(t))])
        self.st = np.concatenate([z, np.cumsum(t)])
        self.sv = np.concatenate([z, np.cumsum(v)])
        self.stt = np.concatenate([z, np.cumsum(t * t)])
        self.svv = np.concatenate([z, np.cumsum(v * v)])
        self.stv = np.concatenate([z, np.cumsum(t * v)])

    def line(self, a: np.ndarray | int, b: np.ndarray | int) -> np.ndarray:
        """Summed squared residual of the least-squares line over samples [a, b)."""
        n = self.s1[b] - self.s1[a]
        st = self.st[b] - self.st[a]
        sv = self.sv[b] - self.sv[a]
        sxx = (self.stt[b] - self.stt[a]) - st * st / n
        sxy = (self.stv[b] - self.stv[a]) - st * sv / n
        syy = (self.svv[b] - self.svv[a]) - sv * sv / n
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = np.where(sxx > 0.0, sxy / sxx, 0.0)
        return np.asarray(np.maximum(syy - slope * sxy, 0.0))


def find_steps(t: np.ndarray, v: np.ndarray, limits: StepLimits = DEFAULT_STEP_LIMITS,
               sigma: float | None = None) -> list[Step]:
    """Steps in one series (finite, time-ascending, glitches already removed), in time order.

    ``t`` should be on a local origin (days since the first point, say) for precision.
    ``sigma`` is the noise σ; estimated from the data when not given.
    """
    n = int(t.size)
    if v.shape != t.shape:
        raise ValueError(f"find_steps: t and v differ in length ({t.size} vs {v.size})")
    if n < 2 * limits.min_segment:
        return []
    noise = noise_sigma(v) if sigma is None else sigma
    prefix = _Prefix(t, v)
    # BIC-like: a split adds a break point, a level and a slope (3 parameters)
    penalty = 3.0 * max(noise, 1e-6) ** 2 * math.log(n)
    found: list[Step] = []
    todo = [(0, n)]
    while todo and len(found) < limits.max_steps:
        a, b = todo.pop()
        if b - a < 2 * limits.min_segment:
            continue
        ks = np.arange(a + limits.min_segment, b - limits.min_segment + 1)
        whole = prefix.line(a, b)
        left = prefix.line(np.full(ks.size, a), ks)
        right = prefix.line(ks, np.full(ks.size, b))
        gain = float(whole) - (left + right)
        best = int(np.argmax(gain))
        k = int(ks[best])
        # the jump is measured locally (medians of the samples either side), not from the
        # two lines, which a short segment's slope would throw far off at its end
        m = limits.min_segment
        jump = float(np.median(v[k:k + m]) - np.median(v[k - m:k]))
        if (gain[best] > penalty and abs(jump) >= limits.min_step
                and abs(jump) >= limits.noise_multiple * noise):
            found.append(Step(index=k, t=float(t[k]), jump=jump))
            todo.extend([(a, k), (k, b)])
    return sorted(found, key=lambda s: s.index)
