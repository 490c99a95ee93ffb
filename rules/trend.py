"""Laser wear: a transmitter's output and bias against its first-seen baseline and temperature.

Inputs are numpy arrays of epoch seconds and values (dBm, mA, °C) taken from history;
NaN values (no reading) are dropped, never treated as zero. Slopes and forecasts of a
quantity live in rules/drift.py; this module answers "is this laser wearing out?".
Nothing here reads a clock.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

SECONDS_PER_DAY = 86_400.0


def _finite_pairs(times: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(times, dtype=np.float64).ravel()
    v = np.asarray(values, dtype=np.float64).ravel()
    if t.shape != v.shape:
        raise ValueError(f"trend: times and values differ in length ({t.size} vs {v.size})")
    ok = np.isfinite(t) & np.isfinite(v)
    return t[ok], v[ok]


@dataclass(slots=True, frozen=True)
class Baseline:
    """A module's first-seen readings, by serial, kept apart from the samples.

    Retention never deletes it, so "fallen from its first readings" means from when the
    module was first seen, not from the start of whatever window a query asked for.
    """

    serial: str
    t: float  # when first seen
    tx_dbm: float | None
    bias_ma: float | None
    temperature_c: float | None


def temperature_coefficient(times: np.ndarray, values: np.ndarray, temps: np.ndarray,
                            min_pairs: int = 20, min_spread_c: float = 0.1) -> float | None:
    """d value / d temperature, from the series' short-term temperature swings.

    Least squares of first differences on [Δt, ΔT]: differencing removes the slow level
    (ageing shows only as the small Δt term), so the coefficient comes from how the value
    follows the day-to-day and diurnal temperature changes. None when temperature barely
    moves apart from a steady drift (its swings, after the Δt part is taken out, spread
    less than ``min_spread_c``): the data cannot tell temperature from time then.
    """
    t = np.asarray(times, dtype=np.float64).ravel()
    v = np.asarray(values, dtype=np.float64).ravel()
    temp = np.asarray(temps, dtype=np.float64).ravel()
    if not t.shape == v.shape == temp.shape:
        raise ValueError("temperature_coefficient: times, values and temps differ in length")
    ok = np.isfinite(t) & np.isfinite(v) & np.isfinite(temp)
    t, v, temp = t[ok], v[ok], temp[ok]
    order = np.argsort(t, kind="stable")
    dt, dv, dT = np.diff(t[order]), np.diff(v[order]), np.diff(temp[order])
    if dt.size < min_pairs:
        return None
    # a glitch makes two huge differences; leave those out (beyond 5 robust σ)
    spread = 1.4826 * float(np.median(np.abs(dv - np.median(dv))))
    calm = np.abs(dv - np.median(dv)) <= max(5.0 * spread, 1e-9)
    dt, dv, dT = dt[calm], dv[calm], dT[calm]
    if dt.size < min_pairs:
        return None
    a = np.column_stack([dt / SECONDS_PER_DAY, dT])
    # how much of ΔT is left once the part that goes with Δt is taken out
    k = float(a[:, 0] @ a[:, 1]) / float(a[:, 0] @ a[:, 0])
    if float(np.std(a[:, 1] - k * a[:, 0])) < min_spread_c:
        return None
    coef, *_ = np.linalg.lstsq(a, dv, rcond=None)
    return float(coef[1])


@dataclass(slots=True, frozen=True)
class WearVerdict:
    """Whether a transmitter shows the usual signs of laser wear-out, and why."""

    worn: bool
    tx_drop_db: float | None  # baseline minus recent (positive: output fell), at equal temperature
    bias_rise: float | None  # recent bias over baseline bias, minus 1, at equal temperature
    reason: str
    since: float | None = None  # the baseline's time: the module's first sight, if known
    temperature_note: str = ""  # how temperature was allowed for (or why it could not be)


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
    #: a temperature change between baseline and now that must be allowed for; below
    #: it the DDM temperature accuracy (±3 °C, standards.md, memory) says nothing
    temperature_c: float = 3.0


DEFAULT_WEAR_LIMITS = WearLimits()


@dataclass(slots=True, frozen=True)
class _Ends:
    base: float
    recent: float
    note: str  # "" or how temperature was handled
    judged: bool  # False: a temperature change that could not be allowed for


def _ends(t: np.ndarray, v: np.ndarray, temp: np.ndarray | None, base_value: float | None,
          base_temp: float | None, limits: WearLimits, log: bool) -> _Ends | None:
    """Baseline and recent level of one quantity, the recent one moved to baseline temperature.

    ``log``: judge the natural log (bias: a laser's threshold current grows roughly
    exponentially with temperature, so its temperature effect is a ratio, not a step).
    """
    order = np.argsort(t, kind="stable")
    t, v = t[order], v[order]
    tmp = temp[order] if temp is not None else None
    first, last = limits.baseline_points, limits.recent_points
    if v.size < last + (0 if base_value is not None else first):
        return None
    if log:
        v = np.log(np.where(v > 0.0, v, np.nan))
        base_value = math.log(base_value) if base_value is not None and base_value > 0 else None
    base = float(np.nanmedian(v[:first])) if base_value is None else base_value
    recent = float(np.nanmedian(v[-last:]))
    if tmp is None:
        return _Ends(base, recent, "", True)
    t_base = float(np.nanmedian(tmp[:first])) if base_temp is None else base_temp
    t_now = float(np.nanmedian(tmp[-last:]))
    warmer = t_now - t_base
    if not math.isfinite(warmer) or abs(warmer) < limits.temperature_c:
        return _Ends(base, recent, "", True)
    coef = temperature_coefficient(t, v, tmp)
    if coef is None:
        return _Ends(base, recent, f"module {warmer:+.0f} °C since its baseline, and its "
                     "history cannot separate temperature from time", False)
    return _Ends(base, recent - coef * warmer,
                 f"allowing for the module being {warmer:+.0f} °C from its baseline", True)


def laser_wear(
    times: np.ndarray,
    tx_dbm: np.ndarray,
    bias_ma: np.ndarray | None = None,
    limits: WearLimits = DEFAULT_WEAR_LIMITS,
    *,
    temperature_c: np.ndarray | None = None,
    baseline: Baseline | None = None,
) -> WearVerdict:
    """Judge one transmitter lane from its Tx power (and bias) history.

    ``bias_ma`` and ``temperature_c``, when given, are sampled at ``times``. With a
    ``baseline`` (the module serial's first-seen readings) the comparison is against it;
    otherwise against the median of the first few readings given. Recent readings are
    moved to the baseline's temperature with the coefficient the history itself shows
    (``temperature_coefficient``), so a warm season at constant output is not wear.
    Medians of several readings are compared, so one noisy reading neither raises nor
    hides the verdict.
    """
    t, tx = _finite_pairs(times, tx_dbm)
    ok = np.isfinite(np.asarray(tx_dbm, dtype=np.float64).ravel())
    temp = None
    if temperature_c is not None:
        temp = np.asarray(temperature_c, dtype=np.float64).ravel()
        if temp.shape != ok.shape:
            raise ValueError("laser_wear: temperature and times differ in length")
    since = baseline.t if baseline is not None else (float(t.min()) if t.size else None)
    tx_ends = _ends(t, tx, temp[ok] if temp is not None else None,
                    baseline.tx_dbm if baseline else None,
                    baseline.temperature_c if baseline else None, limits, log=False)
    if tx_ends is None:
        return WearVerdict(False, None, None, "not enough Tx power history", since)
    tx_drop = tx_ends.base - tx_ends.recent
    bias_rise: float | None = None
    bias_ends = None
    if bias_ma is not None:
        tb, b = _finite_pairs(times, bias_ma)
        okb = np.isfinite(np.asarray(bias_ma, dtype=np.float64).ravel())
        bias_ends = _ends(tb, b, temp[okb] if temp is not None else None,
                          baseline.bias_ma if baseline else None,
                          baseline.temperature_c if baseline else None, limits, log=True)
        if bias_ends is not None and bias_ends.judged:
            bias_rise = math.exp(bias_ends.recent - bias_ends.base) - 1.0
    note = tx_ends.note or (bias_ends.note if bias_ends is not None else "")
    suffix = f" ({note})" if note and tx_ends.judged else ""
    if tx_ends.judged and tx_drop >= limits.tx_drop_db:
        return WearVerdict(True, tx_drop, bias_rise,
                           f"Tx power has fallen {tx_drop:.1f} dB from its first readings"
                           + suffix, since, note)
    # Bias climbing while output holds (or sags) is the laser working harder for the same
    # light; bias climbing with output also climbing is a changed set point, not wear.
    if bias_rise is not None and bias_rise >= limits.bias_rise and tx_drop > -limits.steady_tx_db:
        return WearVerdict(True, tx_drop, bias_rise,
                           f"laser bias has risen {bias_rise * 100:.0f} % at steady Tx power"
                           + suffix, since, note)
    return WearVerdict(False, tx_drop if tx_ends.judged else None, bias_rise, "", since, note)
