"""Robust drift: Theil–Sen against scipy, steps told from slides, forecasts and their reasons.

Synthetic series with a known slope, known steps and known glitches; the reference for
slopes and intervals is scipy.stats.theilslopes (a general-purpose library, test extra
only), which implements Sen (1968) eq. 2.6 as rules/theilsen.py does.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import theilslopes

from lightwarden.rules.drift import DAY, NoForecast, drift, forecast
from lightwarden.rules.steps import find_steps, hampel_outliers
from lightwarden.rules.theilsen import theil_sen

T0 = 1_800_000_000.0
QUARTER = T0 + np.arange(0.0, 90 * DAY, 900.0)  # 90 days at one sample every 15 minutes
DAYS = (QUARTER - T0) / DAY
NOW = float(QUARTER[-1])


def _glitchy_slide(seed: int = 5) -> np.ndarray:
    """-0.01 dB/day from -5 dBm, 0.05 dB noise, 3 % of readings 2-8 dB low (bad reads)."""
    rng = np.random.default_rng(seed)
    v = -5.0 - 0.01 * DAYS + rng.normal(0.0, 0.05, DAYS.size)
    bad = rng.random(DAYS.size) < 0.03
    v[bad] -= rng.uniform(2.0, 8.0, int(bad.sum()))
    return v


@pytest.mark.parametrize("n, seed, ties", [(5, 1, False), (40, 2, True), (90, 3, False),
                                            (600, 4, True)])
def test_theil_sen_slope_and_interval_equal_scipy(n: int, seed: int, ties: bool):
    # source: scipy.stats.theilslopes (general reference; Sen 1968 eq. 2.6 with ties)
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0.0, 90.0, n))
    y = -0.02 * x + rng.normal(0.0, 0.1, n)
    y[rng.random(n) < 0.05] -= 6.0
    if ties:  # repeated times and values change the interval's variance term
        x[: n // 4] = np.round(x[: n // 4])
        y = np.round(y, 1)
    ref = theilslopes(y, x, 0.95)
    got = theil_sen(x, y, 0.95)
    assert got is not None
    assert got.slope == pytest.approx(ref.slope, abs=1e-12)
    assert got.low == pytest.approx(ref.low_slope, abs=1e-12)
    assert got.high == pytest.approx(ref.high_slope, abs=1e-12)
    assert got.intercept == pytest.approx(ref.intercept, abs=1e-9)
    ref90 = theilslopes(y, x, 0.90)
    got90 = theil_sen(x, y, 0.90)
    assert got90 is not None
    assert (got90.low, got90.high) == pytest.approx((ref90.low_slope, ref90.high_slope))


def test_theil_sen_refuses_what_has_no_slope():
    assert theil_sen(np.array([1.0]), np.array([2.0])) is None
    assert theil_sen(np.full(4, 3.0), np.arange(4.0)) is None
    with pytest.raises(ValueError, match="differ in length"):
        theil_sen(np.arange(3.0), np.arange(4.0))
    with pytest.raises(ValueError, match="confidence"):
        theil_sen(np.arange(3.0), np.arange(3.0), confidence=1.0)


def test_glitches_do_not_hide_a_slide_and_the_forecast_sits_inside_its_interval():
    # Known truth: -5 dBm at day 0, -0.01 dB/day, so -8.5 dBm is reached on day 350.
    v = _glitchy_slide()
    d = drift(QUARTER, v, NOW)
    assert d.reason is None and d.steps == ()
    assert d.glitches > 0.025 * v.size  # most bad reads were found and left out
    assert d.resolution_s == DAY and d.points == 90  # 90-day trends on daily points
    assert d.low_per_day <= -0.01 <= d.high_per_day
    assert d.rate_per_day == pytest.approx(-0.01, abs=2e-4)
    f = forecast(d, -8.5, lower=True, now=NOW)
    truth = T0 + 350 * DAY
    assert f.reason is None and f.earliest <= f.at <= f.latest
    assert f.earliest <= truth <= f.latest
    # the same series through least squares: the glitches pull the slope far off
    ols = np.polyfit(DAYS, v, 1)[0]  # source: numpy.polyfit (reference least squares)
    assert abs(ols - -0.01) > abs(d.rate_per_day - -0.01)


def test_a_connector_step_then_flat_is_a_step_not_a_slide():
    # -2 dB at day 60 (a dirty connector or an added patch), then flat: never runs out.
    rng = np.random.default_rng(8)
    v = np.where(DAYS < 60.0, -5.0, -7.0) + rng.normal(0.0, 0.05, DAYS.size)
    d = drift(QUARTER, v, NOW)
    assert len(d.steps) == 1
    assert d.steps[0].t == pytest.approx(T0 + 60 * DAY, abs=3600.0)
    assert d.steps[0].jump == pytest.approx(-2.0, abs=0.1)
    assert d.since == d.steps[0].t and d.reason is NoForecast.FLAT
    assert forecast(d, -8.5, lower=True, now=NOW).at is None
    # a least-squares line through the whole quarter would have said about -0.03 dB/day
    assert np.polyfit(DAYS, v, 1)[0] < -0.02  # source: numpy.polyfit


def test_a_slide_is_not_cut_into_steps_and_a_step_then_slide_keeps_the_slide():
    rng = np.random.default_rng(9)
    slide = -5.0 - 0.03 * DAYS + rng.normal(0.0, 0.05, DAYS.size)
    assert drift(QUARTER, slide, NOW).steps == ()
    both = (np.where(DAYS < 40.0, -5.0, -6.0) - 0.02 * np.maximum(DAYS - 40.0, 0.0)
            + rng.normal(0.0, 0.05, DAYS.size))
    d = drift(QUARTER, both, NOW)
    assert [round(s.jump) for s in d.steps] == [-1]
    assert d.reason is None and d.low_per_day <= -0.02 <= d.high_per_day


def test_no_forecast_reasons():
    rng = np.random.default_rng(10)
    quiet = -5.0 + rng.normal(0.0, 0.05, DAYS.size)
    assert drift(QUARTER, quiet, NOW).reason is NoForecast.FLAT
    noisy = -5.0 - 0.001 * DAYS + rng.normal(0.0, 1.5, DAYS.size)
    assert drift(QUARTER, noisy, NOW).reason is NoForecast.NOISY
    stepped = np.where(DAYS < 88.5, -5.0, -7.0) + rng.normal(0.0, 0.05, DAYS.size)
    d = drift(QUARTER, stepped, NOW)
    assert d.reason is NoForecast.JUST_STEPPED
    assert d.steps[-1].t == pytest.approx(T0 + 88.5 * DAY, abs=3600.0)
    short = drift(QUARTER[:96], -5.0 - 0.1 * DAYS[:96], float(QUARTER[95]))
    assert short.reason is NoForecast.TOO_SHORT
    assert drift(np.empty(0), np.empty(0), NOW).reason is NoForecast.TOO_SHORT
    rising = drift(QUARTER, -5.0 + 0.02 * DAYS + rng.normal(0.0, 0.05, DAYS.size), NOW)
    assert forecast(rising, -8.5, lower=True, now=NOW).reason is NoForecast.MOVING_AWAY
    # towards a ceiling (overload at -1 dBm): -5 + 0.02 d = -1 on day 200
    up = forecast(rising, -1.0, lower=False, now=NOW)
    assert up.earliest <= T0 + 200 * DAY <= up.latest
    far = forecast(rising, -1.0, lower=False, now=NOW, horizon_s=30 * DAY)
    assert far.at is None and far.reason is NoForecast.BEYOND_HORIZON
    already = forecast(rising, -4.0, lower=False, now=NOW)  # the line is at -3.2 now
    assert already.at == NOW


def test_nan_readings_are_dropped():
    v = _glitchy_slide()
    v[::7] = np.nan
    d = drift(QUARTER, v, NOW)
    assert d.reason is None and d.rate_per_day == pytest.approx(-0.01, abs=3e-4)
    with pytest.raises(ValueError, match="differ in length"):
        drift(QUARTER, v[:10], NOW)


def test_hampel_marks_single_glitches_but_not_a_step():
    v = np.r_[np.full(20, -5.0), np.full(20, -7.0)]
    v[10] = -12.0
    marked = hampel_outliers(v, 3, 5.0, floor=0.5)
    assert list(np.flatnonzero(marked)) == [10]
    steps = find_steps(np.arange(40.0)[~marked], v[~marked])
    assert [s.index for s in steps] == [19]  # 20th kept sample is the first at -7


def test_wear_that_began_partway_is_forecast_from_its_own_pace():
    # 60 quiet days, then the laser starts to wear: -0.06 dB/day for the last 30 days
    # (the lab's laser_wear story). A line through all 90 days would say about -0.03.
    rng = np.random.default_rng(12)
    v = -5.0 - 0.06 * np.maximum(DAYS - 60.0, 0.0) + rng.normal(0.0, 0.05, DAYS.size)
    d = drift(QUARTER, v, NOW)
    assert d.steps == () and d.reason is None
    assert d.low_per_day <= -0.06 <= d.high_per_day
    assert d.since >= T0 + 59 * DAY
    # -5 - 0.06 * 30 = -6.8 dBm now; -9.8 dBm is 50 days on. The recent stretch still
    # holds the onset's last quiet day, so the date is judged to a day, not by the interval
    f = forecast(d, -9.8, lower=True, now=NOW)
    assert f.earliest <= f.at <= f.latest
    assert f.at == pytest.approx(NOW + 50 * DAY, abs=DAY)


def test_the_interval_holds_the_true_slope_about_as_often_as_it_says():
    # source: the 95 % confidence level itself (Sen 1968): over many noisy series the
    # interval should miss the true slope about one time in twenty
    hits = 0
    trials = 60
    for seed in range(trials):
        rng = np.random.default_rng(100 + seed)
        v = -5.0 - 0.02 * DAYS + rng.normal(0.0, 0.05, DAYS.size)
        d = drift(QUARTER, v, NOW)
        hits += d.low_per_day <= -0.02 <= d.high_per_day
    assert hits / trials >= 0.85


def test_years_of_history_are_binned_wider_not_refused():
    t = T0 + np.arange(0.0, 3 * 365 * DAY, 6 * 3600.0)  # three years at 6-hourly samples
    v = -5.0 - 0.002 * (t - T0) / DAY
    d = drift(t, v, float(t[-1]))
    assert d.points <= 1000 and d.resolution_s == 2 * DAY
    assert d.rate_per_day == pytest.approx(-0.002, rel=1e-3)
