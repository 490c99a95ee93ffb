"""Drift of one quantity over time: slope, forecast of when margin runs out, laser wear.

Inputs are numpy arrays of epoch seconds and values (dBm, mA, ...) taken from history;
NaN values (no reading) are dropped, never treated as zero. Nothing here reads a clock:
``now`` is always passed in.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

SECONDS_PER_DAY = 86_400.0


@dataclass(slots=True, frozen=True)
class Trend:
    """A least-squares straight line through one quantity's history."""

    slope_per_s: float
    intercept: float  # fitted value at t_ref
    t_ref: float  # mean of the times used; the fit is centred here for numerical stability
    r_squared: float  # share of the variance the line explains; NaN when the values never vary
    residual_rms: float  # typical distance of a reading from the line, in the value's unit
    points: int
    span_s: float  # time between the first and the last reading used

    @property
    def rate_per_day(self) -> float:
        return self.slope_per_s * SECONDS_PER_DAY

    def value_at(self, t: float) -> float:
        return self.intercept + self.slope_per_s * (t - self.t_ref)


def _finite_pairs(times: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(times, dtype=np.float64).ravel()
    v = np.asarray(values, dtype=np.float64).ravel()
    if t.shape != v.shape:
        raise ValueError(f"trend: times and values differ in length ({t.size} vs {v.size})")
    ok = np.isfinite(t) & np.isfinite(v)
    return t[ok], v[ok]


def fit_trend(times: np.ndarray, values: np.ndarray, *, min_points: int = 3) -> Trend | None:
    """Fit value = a + b*t by least squares; None when there is too little to fit."""
    t, v = _finite_pairs(times, values)
    if t.size < max(min_points, 2):
        return None
    t_ref = float(t.mean())
    tc = t - t_ref
    sxx = float(tc @ tc)
    if sxx == 0.0:  # every reading at the same instant: no slope exists
        return None
    v_mean = float(v.mean())
    dv = v - v_mean
    slope = float(tc @ dv) / sxx
    resid = dv - slope * tc
    ss_res = float(resid @ resid)
    ss_tot = float(dv @ dv)
    r_squared = 1.0 - ss_res / ss_tot if ss_tot > 0.0 else math.nan
    return Trend(
        slope_per_s=slope,
        intercept=v_mean,
        t_ref=t_ref,
        r_squared=r_squared,
        residual_rms=math.sqrt(ss_res / t.size),
        points=int(t.size),
        span_s=float(t.max() - t.min()),
    )


def forecast_crossing(
    times: np.ndarray,
    values: np.ndarray,
    edge: float,
    now: float,
    *,
    min_points: int = 3,
    min_r_squared: float = 0.5,
    horizon_s: float | None = None,
) -> float | None:
    """Epoch seconds when the fitted line reaches ``edge``; None when it never will.

    The direction is taken from where the line stands at ``now``: a line below the edge
    must be rising, one above it falling. Returns ``now`` when the line is already on
    the edge. A fit that explains less than ``min_r_squared`` of the variance gives no
    date: a forecast drawn through noise would send a planner after nothing. With
    ``horizon_s`` set, crossings further than that from ``now`` are not reported.
    """
    if not math.isfinite(edge):
        return None
    trend = fit_trend(times, values, min_points=min_points)
    if trend is None or trend.slope_per_s == 0.0:
        return None
    if not trend.r_squared >= min_r_squared:  # NaN (flat history) fails too
        return None
    gap = edge - trend.value_at(now)
    if gap == 0.0:
        return now
    if gap * trend.slope_per_s < 0.0:  # moving away from the edge
        return None
    wait_s = gap / trend.slope_per_s
    if horizon_s is not None and wait_s > horizon_s:
        return None
    return now + wait_s


@dataclass(slots=True, frozen=True)
class WearVerdict:
    """Whether a transmitter shows the usual signs of laser wear-out, and why."""

    worn: bool
    tx_drop_db: float | None  # first readings minus recent readings (positive: output fell)
    bias_rise: float | None  # recent bias over first bias, minus 1 (0.25 = 25 % more)
    reason: str


@dataclass(slots=True, frozen=True)
class WearLimits:
    """When to call a transmitter worn.

    Defaults follow the rule of thumb in standards.md "Rules of thumb" (practice): output
    falling 1-2 dB from its first readings, or bias rising at constant output. We flag at
    the low end (1 dB) because the point is to schedule a swap before the link fails.
    The 20 % bias rise is our choice for an early notice; the GR-468-CORE end-of-life
    criteria are later than that (figures from memory, not confirmed).
    """

    tx_drop_db: float = 1.0
    bias_rise: float = 0.20
    steady_tx_db: float = 0.5  # output "constant" when it moved less than this
    baseline_points: int = 5  # readings that make "first readings" (median of them)
    recent_points: int = 5  # readings that make "now" (median of them)


DEFAULT_WEAR_LIMITS = WearLimits()


def _ends(
    times: np.ndarray, values: np.ndarray, first: int, last: int
) -> tuple[float, float] | None:
    t, v = _finite_pairs(times, values)
    if t.size < first + last:
        return None
    v = v[np.argsort(t, kind="stable")]
    return float(np.median(v[:first])), float(np.median(v[-last:]))


def laser_wear(
    times: np.ndarray,
    tx_dbm: np.ndarray,
    bias_ma: np.ndarray | None = None,
    limits: WearLimits = DEFAULT_WEAR_LIMITS,
) -> WearVerdict:
    """Judge one transmitter lane from its Tx power (and bias) history.

    Medians of the first and the last few readings are compared rather than single
    samples, so one noisy reading neither raises nor hides the verdict.
    """
    tx = _ends(times, tx_dbm, limits.baseline_points, limits.recent_points)
    if tx is None:
        return WearVerdict(False, None, None, "not enough Tx power history")
    tx_drop = tx[0] - tx[1]
    bias_rise: float | None = None
    if bias_ma is not None:
        bias = _ends(times, bias_ma, limits.baseline_points, limits.recent_points)
        if bias is not None and bias[0] > 0.0:
            bias_rise = bias[1] / bias[0] - 1.0
    if tx_drop >= limits.tx_drop_db:
        return WearVerdict(
            True,
            tx_drop,
            bias_rise,
            f"Tx power has fallen {tx_drop:.1f} dB from its first readings",
        )
    # Bias climbing while output holds (or sags) is the laser working harder for the same
    # light; bias climbing with output also climbing is a changed set point, not wear.
    if bias_rise is not None and bias_rise >= limits.bias_rise and tx_drop > -limits.steady_tx_db:
        return WearVerdict(
            True,
            tx_drop,
            bias_rise,
            f"laser bias has risen {bias_rise * 100:.0f} % at steady Tx power",
        )
    return WearVerdict(False, tx_drop, bias_rise, "")
