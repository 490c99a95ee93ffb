"""Drift, forecast and laser wear against numpy's own least squares and synthetic lines."""

from __future__ import annotations

import math

import numpy as np
import pytest

from lightwarden.rules.trend import (
    SECONDS_PER_DAY,
    WearLimits,
    fit_trend,
    forecast_crossing,
    laser_wear,
)

T0 = 1_800_000_000.0
HOURLY_90_DAYS = T0 + np.arange(0, 90 * SECONDS_PER_DAY, 3600.0)


def test_slope_of_an_exact_line_is_recovered():
    values = -3.0 - 0.02 * (HOURLY_90_DAYS - T0) / SECONDS_PER_DAY  # -0.02 dB per day
    tr = fit_trend(HOURLY_90_DAYS, values)
    assert tr.rate_per_day == pytest.approx(-0.02, rel=1e-9)
    assert tr.r_squared == pytest.approx(1.0)
    assert tr.residual_rms == pytest.approx(0.0, abs=1e-9)
    assert tr.value_at(T0) == pytest.approx(-3.0)


def test_noisy_fit_matches_numpy_polyfit():
    # source: numpy.polyfit (reference least-squares implementation)
    rng = np.random.default_rng(7)
    t = HOURLY_90_DAYS
    days = (t - T0) / SECONDS_PER_DAY
    values = -6.0 - 0.015 * days + rng.normal(0.0, 0.2, t.size)
    tr = fit_trend(t, values)
    slope, intercept = np.polyfit(days, values, 1)
    assert tr.rate_per_day == pytest.approx(slope, rel=1e-9)
    assert tr.value_at(T0) == pytest.approx(intercept, rel=1e-9)
    r = np.corrcoef(days, values)[0, 1]  # R^2 of a straight-line fit is r squared
    assert tr.r_squared == pytest.approx(r * r, rel=1e-9)
    assert tr.residual_rms == pytest.approx(0.2, rel=0.1)


def test_nan_readings_are_dropped_and_too_little_history_gives_none():
    t = T0 + np.arange(6) * 3600.0
    v = np.array([1.0, math.nan, 3.0, math.nan, 5.0, 6.0])
    tr = fit_trend(t, v)
    assert tr.points == 4
    assert tr.rate_per_day == pytest.approx(24.0)  # 1 per hour through the kept points
    assert fit_trend(t[:2], v[:2]) is None
    assert fit_trend(np.full(4, T0), np.arange(4.0)) is None
    with pytest.raises(ValueError, match="differ in length"):
        fit_trend(t, v[:3])


def test_forecast_date_when_margin_runs_out():
    # Margin to sensitivity 4.0 dB on day 0, shrinking 0.02 dB/day: 0 dB on day 200.
    margin = 4.0 - 0.02 * (HOURLY_90_DAYS - T0) / SECONDS_PER_DAY
    now = HOURLY_90_DAYS[-1]
    when = forecast_crossing(HOURLY_90_DAYS, margin, 0.0, now)
    assert when == pytest.approx(T0 + 200 * SECONDS_PER_DAY, abs=1.0)
    # Rising towards an upper edge works the same way.
    rising = -3.0 + 0.01 * (HOURLY_90_DAYS - T0) / SECONDS_PER_DAY
    up = forecast_crossing(HOURLY_90_DAYS, rising, -1.0, now)
    assert up == pytest.approx(T0 + 200 * SECONDS_PER_DAY, abs=1.0)


def test_no_forecast_when_moving_away_flat_noisy_or_beyond_horizon():
    now = HOURLY_90_DAYS[-1]
    days = (HOURLY_90_DAYS - T0) / SECONDS_PER_DAY
    assert forecast_crossing(HOURLY_90_DAYS, 4.0 + 0.02 * days, 0.0, now) is None
    assert forecast_crossing(HOURLY_90_DAYS, np.full(days.size, 4.0), 0.0, now) is None
    noise = 4.0 + np.random.default_rng(3).normal(0.0, 0.5, days.size) - 1e-4 * days
    assert forecast_crossing(HOURLY_90_DAYS, noise, 0.0, now) is None
    falling = 4.0 - 0.02 * days
    assert (
        forecast_crossing(HOURLY_90_DAYS, falling, 0.0, now, horizon_s=30 * SECONDS_PER_DAY) is None
    )
    assert forecast_crossing(HOURLY_90_DAYS, falling, math.nan, now) is None


def test_forecast_on_the_edge_is_now():
    t = T0 + np.arange(3) * 3600.0
    assert forecast_crossing(t, np.array([2.0, 1.0, 0.0]), 0.0, t[-1]) == pytest.approx(t[-1])


DAILY_YEAR = T0 + np.arange(365) * SECONDS_PER_DAY


def test_laser_wear_when_tx_falls_a_db_from_its_first_readings():
    # source: standards.md "Rules of thumb" (common practice): output falling 1-2 dB from
    # its first readings is wear; we flag at 1 dB.
    rng = np.random.default_rng(11)
    tx = -2.0 - 1.3 * np.arange(365) / 364 + rng.normal(0, 0.05, 365)
    v = laser_wear(DAILY_YEAR, tx)
    assert v.worn and v.tx_drop_db == pytest.approx(1.3, abs=0.15)
    assert "fallen" in v.reason
    steady = laser_wear(DAILY_YEAR, -2.0 - 0.5 * np.arange(365) / 364)
    assert not steady.worn and steady.tx_drop_db == pytest.approx(0.5, abs=0.05)


def test_laser_wear_when_bias_climbs_at_steady_output():
    # source: standards.md "Rules of thumb" (common practice): bias rising at constant
    # output. 20 % is our early-notice threshold; GR-468-CORE limits are later (memory).
    tx = np.full(365, -2.0)
    bias = 30.0 * (1.0 + 0.3 * np.arange(365) / 364)
    v = laser_wear(DAILY_YEAR, tx, bias)
    assert v.worn and v.bias_rise == pytest.approx(0.3, abs=0.02)
    assert "bias" in v.reason
    # Bias and output rising together is a changed set point, not wear.
    brighter = -2.0 + 1.0 * np.arange(365) / 364
    assert not laser_wear(DAILY_YEAR, brighter, bias).worn
    assert not laser_wear(DAILY_YEAR, tx, np.full(365, 30.0)).worn


def test_laser_wear_needs_history_and_limits_are_adjustable():
    short = laser_wear(DAILY_YEAR[:6], np.linspace(-2, -5, 6))
    assert not short.worn and short.tx_drop_db is None
    tx = -2.0 - 1.3 * np.arange(365) / 364
    assert not laser_wear(DAILY_YEAR, tx, limits=WearLimits(tx_drop_db=2.0)).worn
