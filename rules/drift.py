"""Robust drift of one quantity and when it runs out: steps first, then a slope, then a date.

The pipeline, on finite, time-ascending samples:

1. glitch readings are marked with a Hampel filter and left out (rules/steps.py);
2. points are averaged to one per hour (spans up to ``daily_after_days``) or one per day
   (longer spans), since Theil–Sen costs O(n²) and months of wear are seen in days;
3. steps (connector, patch, swap) are found; only the segment after the last one is
   used, because a level that jumped says nothing about the slope after it;
4. Theil–Sen slope with Sen's interval on that segment (rules/theilsen.py); when the
   last ``fit_days`` (30) alone give a slope whose interval leaves out the segment's,
   the pace has changed (wear has an onset, then speeds up) and the recent line is used;
5. a forecast is given only when the interval excludes zero and the segment is long
   enough, with the earliest and latest dates the interval allows; otherwise a reason.

Nothing here reads a clock: ``now`` is passed in.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import StrEnum

import numpy as np

from lightwarden.rules.steps import (
    DEFAULT_STEP_LIMITS,
    Step,
    StepLimits,
    find_steps,
    hampel_outliers,
    noise_sigma,
)
from lightwarden.rules.theilsen import theil_sen

DAY = 86_400.0
HOUR = 3_600.0
#: at most this many points go to Theil–Sen (half a million pairs)
MAX_BINS = 1000


class NoForecast(StrEnum):
    """Why a series gives no run-out date."""

    TOO_SHORT = "too short"  # too few points or too few days to judge a slope
    JUST_STEPPED = "just stepped"  # a step, and too little history since it
    FLAT = "flat"  # the slope's interval includes zero on a quiet series
    NOISY = "noisy"  # the slope's interval includes zero and the series is noisy
    MOVING_AWAY = "moving away"  # heading away from the edge
    BEYOND_HORIZON = "beyond horizon"  # further off than the planning horizon


@dataclass(slots=True, frozen=True)
class DriftLimits:
    """What a slope needs before it is believed.

    The numbers are our choices: 7 points over 3 days after the last step is the least
    that separates a slide from the day-to-day wander of DDM power readings (a few tenths
    of a dB, common practice), and 1 dB of noise σ is where a slope through it stops
    being evidence of anything.
    """

    min_points: int = 7
    min_span_s: float = 3 * DAY
    noisy_sigma: float = 1.0  # robust σ of residuals above which "no slope" means noisy
    confidence: float = 0.95
    daily_after_days: float = 14.0  # spans longer than this are judged on daily points
    fit_days: float = 30.0  # the recent stretch checked for a change of pace
    steps: StepLimits = field(default_factory=lambda: DEFAULT_STEP_LIMITS)


DEFAULT_DRIFT_LIMITS = DriftLimits()


@dataclass(slots=True, frozen=True)
class Drift:
    """A series' movement after its last step. Rates are per day; times epoch seconds."""

    rate_per_day: float | None  # Theil–Sen slope; None when too short to fit
    low_per_day: float | None  # the slope's confidence interval
    high_per_day: float | None
    level_now: float | None  # the line's value at ``now``
    level_se: float  # standard error of the line's level (robust σ of the points / √n)
    points: int  # points the slope used (after binning)
    resolution_s: float  # HOUR or DAY: the bin width the slope was judged on
    since: float | None  # start of the stretch used (the last step, the first point, or
    # the start of the recent stretch when the pace changed)
    steps: tuple[Step, ...]
    glitches: int  # samples left out by the Hampel filter
    noise: float  # robust σ of the residuals about the line (value's unit)
    reason: NoForecast | None  # why no forecast is possible whatever the edge; None if one is

    @property
    def moving(self) -> bool:
        return self.reason is None


@dataclass(slots=True, frozen=True)
class Forecast:
    """When a drifting series reaches an edge, with the dates its slope interval allows."""

    at: float | None
    earliest: float | None
    latest: float | None  # None when the slow end of the interval never gets there
    reason: NoForecast | None  # None when ``at`` is set


def _bin(t: np.ndarray, v: np.ndarray, width: float
         ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean time, mean value and first time of the samples in each ``width``-second bin."""
    if t.size == 0:
        return t, v, t
    b = np.floor((t - t[0]) / width).astype(np.int64)
    _, first, inv, counts = np.unique(b, return_index=True, return_inverse=True,
                                      return_counts=True)
    bt = np.bincount(inv, weights=t) / counts
    bv = np.bincount(inv, weights=v) / counts
    return bt, bv, t[first]


def _finite_sorted(times: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(times, dtype=np.float64).ravel()
    v = np.asarray(values, dtype=np.float64).ravel()
    if t.shape != v.shape:
        raise ValueError(f"drift: times and values differ in length ({t.size} vs {v.size})")
    ok = np.isfinite(t) & np.isfinite(v)
    t, v = t[ok], v[ok]
    order = np.argsort(t, kind="stable")
    return t[order], v[order]


def drift(times: np.ndarray, values: np.ndarray, now: float,
          limits: DriftLimits = DEFAULT_DRIFT_LIMITS) -> Drift:
    """How one quantity moves since its last step (see the module docstring)."""
    t, v = _finite_sorted(times, values)
    glitch = hampel_outliers(v, limits.steps.hampel_half_window, limits.steps.hampel_k,
                             floor=limits.steps.min_step)
    t, v = t[~glitch], v[~glitch]
    glitches = int(glitch.sum())
    # steps are looked for on hourly points, so one in the last hours is still seen
    ht, hv, hfirst = _bin(t, v, HOUR)
    origin = float(ht[0]) if ht.size else now
    found = find_steps((ht - origin) / DAY, hv, limits.steps) if ht.size >= 2 else []
    steps = tuple(Step(s.index, float(hfirst[s.index]), s.jump) for s in found)
    since = steps[-1].t if steps else (float(t[0]) if t.size else None)
    if since is not None:
        keep = t >= since
        t, v = t[keep], v[keep]
    seg_span = float(t[-1] - t[0]) if t.size else 0.0
    width = DAY if seg_span > limits.daily_after_days * DAY else HOUR
    if seg_span / width > MAX_BINS:  # years of history: wider bins keep Theil–Sen's pairs few
        width = DAY * math.ceil(seg_span / DAY / MAX_BINS)
    bt, bv, _ = _bin(t, v, width)
    noise = noise_sigma(v)  # of the readings themselves, not of the averaged points
    seg_t = (bt - origin) / DAY
    fit = theil_sen(seg_t, bv, limits.confidence) if bt.size >= 2 else None
    if fit is not None and seg_span > limits.fit_days * DAY:
        # wear has an onset and then speeds up: when the last fit_days alone give a slope
        # whose interval leaves out the whole segment's, the pace has changed and the
        # recent line is the one to forecast with
        recent = bt >= bt[-1] - limits.fit_days * DAY
        rfit = theil_sen(seg_t[recent], bv[recent], limits.confidence)
        if rfit is not None and int(recent.sum()) >= limits.min_points and not (
                rfit.low <= fit.slope <= rfit.high):
            fit, bt, bv, seg_t = rfit, bt[recent], bv[recent], seg_t[recent]
            since = float(t[t >= bt[0] - width / 2][0])
            seg_span = float(t[-1] - since)
    stepped = NoForecast.JUST_STEPPED if steps else NoForecast.TOO_SHORT
    if fit is None:
        return Drift(None, None, None, None, 0.0, int(bt.size), width, since, steps,
                     glitches, noise, stepped)
    reason: NoForecast | None = None
    if bt.size < limits.min_points or seg_span < limits.min_span_s:
        reason = stepped
    elif not fit.excludes_zero:
        reason = NoForecast.NOISY if noise > limits.noisy_sigma else NoForecast.FLAT
    resid = bv - (fit.intercept + fit.slope * seg_t)
    spread = 1.4826 * float(np.median(np.abs(resid - np.median(resid))))
    return Drift(
        rate_per_day=fit.slope, low_per_day=fit.low, high_per_day=fit.high,
        level_now=fit.value_at((now - origin) / DAY),
        level_se=spread / math.sqrt(max(int(bt.size), 1)), points=int(bt.size),
        resolution_s=width, since=since, steps=steps, glitches=glitches, noise=noise,
        reason=reason)


def forecast(d: Drift, edge: float, lower: bool, now: float,
             horizon_s: float | None = None) -> Forecast:
    """When ``d``'s line reaches ``edge`` (a level in the series' unit), or why not.

    ``lower`` says the edge is a floor (sensitivity, a low warning: reached by falling);
    otherwise it is a ceiling (overload: reached by rising). A line already at or past
    the edge gives ``now``. The interval takes the slope's two confidence ends, and the
    present level moved by its own 95 % uncertainty (1.96 standard errors) towards and
    away from the edge: with a tight slope the level's error is what is left.
    """
    if d.reason is not None:
        return Forecast(None, None, None, d.reason)
    if d.rate_per_day is None or d.level_now is None or d.low_per_day is None \
            or d.high_per_day is None:  # a drift with no reason always has all four
        raise ValueError("forecast: drift has no slope but no reason either")
    if not math.isfinite(edge):
        return Forecast(None, None, None, NoForecast.MOVING_AWAY)
    gap = edge - d.level_now  # negative for a floor not yet reached
    if (gap >= 0.0) if lower else (gap <= 0.0):
        return Forecast(now, now, now, None)
    sign = -1.0 if lower else 1.0  # the direction of travel towards the edge
    if not d.rate_per_day * sign > 0.0:
        return Forecast(None, None, None, NoForecast.MOVING_AWAY)
    fast, slow = sorted((d.low_per_day, d.high_per_day), key=abs, reverse=True)
    at = now + gap / d.rate_per_day * DAY
    slack = 1.96 * d.level_se * sign  # gap is negative for a floor, positive for a ceiling
    near_gap = gap - slack if abs(gap) > abs(slack) else 0.0
    earliest = now + near_gap / fast * DAY
    latest = now + (gap + slack) / slow * DAY if slow * sign > 0.0 else None
    if horizon_s is not None and at - now > horizon_s:
        return Forecast(None, earliest if earliest - now <= horizon_s else None, None,
                        NoForecast.BEYOND_HORIZON)
    return Forecast(at, earliest, latest, None)
