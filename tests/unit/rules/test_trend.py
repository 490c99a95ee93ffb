"""Laser wear against the rule of thumb, its first-seen baseline and module temperature."""

from __future__ import annotations

import numpy as np
import pytest

from lightwarden.rules.trend import (
    SECONDS_PER_DAY,
    Baseline,
    WearLimits,
    laser_wear,
    temperature_coefficient,
)

T0 = 1_800_000_000.0
HOURLY_90_DAYS = T0 + np.arange(0, 90 * SECONDS_PER_DAY, 3600.0)


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


def _season(seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Module temperature over a warming quarter: +15 °C, with a ±2 °C daily swing."""
    rng = np.random.default_rng(seed)
    days = (HOURLY_90_DAYS - T0) / SECONDS_PER_DAY
    temp = 30.0 + 15.0 * np.sin(np.pi / 2 * days / 90) + 2.0 * np.sin(2 * np.pi * days)
    return days, temp + rng.normal(0.0, 0.3, days.size)


def test_a_warm_season_at_constant_output_is_not_wear():
    # Under automatic power control the bias rises with temperature to hold the output:
    # threshold current grows about exp(T/T0), T0 ~ 60 K for a DFB (from memory), i.e.
    # ~1.7 %/°C, so +13 °C is ~25 % more bias: past the 20 % notice if taken as wear.
    days, temp = _season(21)
    rng = np.random.default_rng(22)
    bias = 30.0 * np.exp((temp - 30.0) / 60.0) * (1 + rng.normal(0, 0.005, days.size))
    tx = -2.0 + rng.normal(0.0, 0.03, days.size)
    naive = laser_wear(HOURLY_90_DAYS, tx, bias)
    assert naive.worn and "bias" in naive.reason  # what ignoring temperature would say
    v = laser_wear(HOURLY_90_DAYS, tx, bias, temperature_c=temp)
    assert not v.worn and v.bias_rise == pytest.approx(0.0, abs=0.03)
    assert "allowing for the module" in v.temperature_note
    # the coefficient the history shows is the one the series was made with
    assert temperature_coefficient(HOURLY_90_DAYS, np.log(bias), temp) == pytest.approx(
        1 / 60, rel=0.05)


def test_wear_in_a_warm_season_is_still_wear():
    days, temp = _season(23)
    rng = np.random.default_rng(24)
    bias = 30.0 * np.exp((temp - 30.0) / 60.0) * (1 + 0.3 * days / 90)  # 30 % from ageing
    tx = -2.0 + rng.normal(0.0, 0.03, days.size)
    v = laser_wear(HOURLY_90_DAYS, tx, bias, temperature_c=temp)
    assert v.worn and v.bias_rise == pytest.approx(0.3, abs=0.04)


def test_temperature_that_only_ramps_with_time_is_not_guessed_at():
    days = (HOURLY_90_DAYS - T0) / SECONDS_PER_DAY
    temp = 30.0 + 15.0 * days / 90  # no short-term swing: temperature and time coincide
    bias = 30.0 * np.exp((temp - 30.0) / 60.0)
    v = laser_wear(HOURLY_90_DAYS, np.full(days.size, -2.0), bias, temperature_c=temp)
    assert not v.worn and v.bias_rise is None
    assert "cannot separate" in v.temperature_note


def test_wear_is_judged_from_the_serials_first_seen_baseline_not_the_query_window():
    # 0.9 dB a month (0.03 dB/day) since first seen at T0, 60 days before this 30-day
    # window: within the window it fell 0.9 dB (under the 1 dB notice), since T0 2.7 dB.
    window = HOURLY_90_DAYS[-30 * 24:]
    days = (window - T0) / SECONDS_PER_DAY
    rng = np.random.default_rng(25)
    tx = -2.0 - 0.03 * days + rng.normal(0.0, 0.03, days.size)
    assert not laser_wear(window, tx).worn
    first = Baseline("QM-SN-0001", T0, tx_dbm=-2.0, bias_ma=30.0, temperature_c=None)
    v = laser_wear(window, tx, baseline=first)
    assert v.worn and v.since == T0
    assert v.tx_drop_db == pytest.approx(0.03 * 90, abs=0.1)
