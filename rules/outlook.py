"""What history says about a lane and a span: rates, forecasts, laser wear, span growth.

Pure computation over series that the caller fetched (exporters/store reads them); the
planners' report and the facts that alerts carry both come from here, so the two never
disagree.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from lightwarden.collector.readings import Quantity
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.drift import Drift, Forecast, NoForecast, drift, forecast
from lightwarden.rules.spanloss import judge_span_loss, span_loss_growth
from lightwarden.rules.trend import Baseline, laser_wear

DAY = 86400.0
#: samples at each end of a history compared for span loss growth
GROWTH_SAMPLES = 5


@dataclass(slots=True)
class Series:
    """One quantity of one lane over time."""

    times: np.ndarray  # float64 epoch seconds, ascending
    values: np.ndarray  # float64

    def __len__(self) -> int:
        return int(self.times.shape[0])


@dataclass(slots=True, frozen=True)
class RxWindow:
    """The last Rx window a lane was judged against, kept so reports need no live poll."""

    device: str
    port: str
    lane: int
    pmd: str
    sensitivity: float | None
    overload: float | None
    source: str
    t: float


def span_losses(tx: Series, rx: Series) -> np.ndarray:
    """Tx of one end minus Rx of the other, on the receiver's sample times.

    The two ends are different devices polled at different moments, so the far Tx is
    interpolated onto the Rx times (both change slowly compared with the sample step).
    """
    if len(tx) < 2 or len(rx) == 0:
        return np.empty(0)
    inside = (rx.times >= tx.times[0]) & (rx.times <= tx.times[-1])
    return np.asarray(np.interp(rx.times[inside], tx.times, tx.values) - rx.values[inside])


def series_drift(s: Series, now: float | None = None) -> Drift:
    """The robust drift of one series (rules/drift.py), judged at ``now`` (default: its end)."""
    at = now if now is not None else (float(s.times[-1]) if len(s) else 0.0)
    return drift(s.times, s.values, at)


def _on(times: np.ndarray, other: Series | None) -> np.ndarray | None:
    """``other`` interpolated onto ``times`` (series of one module are polled together)."""
    if other is None or len(other) < 2:
        return None
    return np.asarray(np.interp(times, other.times, other.values))


def _growth(losses: np.ndarray) -> float | None:
    if losses.size < 2 * GROWTH_SAMPLES:
        return None
    return span_loss_growth(losses[:GROWTH_SAMPLES], losses[-GROWTH_SAMPLES:])


def advice_context(quantity: Quantity, own: Series, tx: Series | None, bias: Series | None,
                   wear_end: str, temperature: Series | None = None,
                   baseline: Baseline | None = None) -> AdviceContext:
    """History facts for one reading.

    ``own`` is the reading's own series; ``tx``, ``bias`` and ``temperature`` are those
    of the module whose laser feeds it (the far end's for Rx power, its own for Tx power
    and bias), None when that laser is not known (no plant record for an Rx port);
    ``baseline`` is that module's first-seen readings. The rate is given only when the
    slope's interval excludes zero since the last step (a believed slide).
    """
    d = series_drift(own)
    rate = d.rate_per_day if d.moving else None
    if tx is None:
        return AdviceContext(rate_per_day=rate)
    wear = growth = None
    if len(tx) >= 2:
        wear = laser_wear(tx.times, tx.values, _on(tx.times, bias),
                          temperature_c=_on(tx.times, temperature), baseline=baseline)
    if quantity is Quantity.RX_POWER:
        growth = _growth(span_losses(tx, own))
    return AdviceContext(span_growth_db=growth, wear=wear, wear_end=wear_end,
                         rate_per_day=rate)


@dataclass(slots=True)
class LaneOutlook:
    device: str
    port: str
    lane: int
    pmd: str
    rx_power_dbm: float | None
    sensitivity_dbm: float | None
    overload_dbm: float | None
    window_source: str
    rate_db_per_day: float | None  # Theil–Sen slope since the last step (None: none fitted)
    rate_low: float | None  # the slope's 95 % interval
    rate_high: float | None
    samples: int
    #: when the margin target will no longer be met / when the edge itself is reached,
    #: with the earliest and latest dates the slope's interval allows
    target_lost_at: float | None
    edge_reached_at: float | None
    laser_worn: bool | None
    laser_note: str
    history_note: str = ""
    target_earliest: float | None = None
    target_latest: float | None = None
    no_forecast: str = ""  # a NoForecast word when there is no date
    last_step_at: float | None = None
    last_step_db: float | None = None
    moving: bool = False  # the slope's interval excludes zero since the last step
    #: what is wrong right now: "dark" (no light at the last poll), "overloaded",
    #: "below sensitivity", or "" (inside the window)
    now_state: str = ""


@dataclass(slots=True)
class SpanOutlook:
    span: str  # "A port -> B port"
    engineered_db: float
    measured_db: float | None  # now: median of the last GROWTH_SAMPLES paired samples
    excess_db: float | None  # measured minus engineered
    verdict: str
    growth_db: float | None  # measured minus first, so first + growth = measured
    samples: int
    first_db: float | None = None  # median of the first GROWTH_SAMPLES paired samples


@dataclass(slots=True)
class PlannerReport:
    generated_at: float
    days: float
    lanes: list[LaneOutlook]
    spans: list[SpanOutlook]
    lasers: list[LaserOutlook] = field(default_factory=list)


def lane_outlook(w: RxWindow, rx: Series, ctx: AdviceContext, targets: MarginTargets,
                 now: float, horizon_s: float) -> LaneOutlook:
    """One receiver lane's outlook: its rate and when it loses its target and its edge.

    The direction of travel picks the edge: a falling Rx runs towards sensitivity, a
    rising one towards overload.
    """
    d = series_drift(rx, now)
    target = edge = Forecast(None, None, None, d.reason or NoForecast.MOVING_AWAY)
    rising = d.rate_per_day is not None and d.rate_per_day > 0.0
    if d.reason is None and not rising and w.sensitivity is not None:
        target = forecast(d, w.sensitivity + targets.sensitivity_db, True, now, horizon_s)
        edge = forecast(d, w.sensitivity, True, now, horizon_s)
    elif d.reason is None and rising and w.overload is not None:
        target = forecast(d, w.overload - targets.overload_db, False, now, horizon_s)
        edge = forecast(d, w.overload, False, now, horizon_s)
    step = d.steps[-1] if d.steps else None
    return LaneOutlook(
        device=w.device, port=w.port, lane=w.lane, pmd=w.pmd,
        rx_power_dbm=float(rx.values[-1]) if len(rx) else None,
        sensitivity_dbm=w.sensitivity, overload_dbm=w.overload, window_source=w.source,
        rate_db_per_day=d.rate_per_day, rate_low=d.low_per_day, rate_high=d.high_per_day,
        samples=len(rx), target_lost_at=target.at, edge_reached_at=edge.at,
        laser_worn=ctx.wear.worn if ctx.wear is not None else None,
        laser_note=(f"{ctx.wear_end} end: {ctx.wear.reason or 'no sign of wear'}"
                    if ctx.wear is not None else "far end unknown (no plant record)"),
        history_note=_history_note(d, len(rx)),
        target_earliest=target.earliest, target_latest=target.latest,
        no_forecast=str(target.reason) if target.reason is not None else "",
        last_step_at=step.t if step else None, last_step_db=step.jump if step else None,
        moving=d.moving, now_state=_now_state(w, rx),
    )


def _now_state(w: RxWindow, rx: Series) -> str:
    # history keeps only readings with light; a window written at the last kept poll with
    # no Rx sample at that time means the receiver saw no light then
    if len(rx) == 0 or float(rx.times[-1]) < w.t - 1.0:
        return "dark"
    last = float(rx.values[-1])
    if w.overload is not None and last > w.overload:
        return "overloaded"
    if w.sensitivity is not None and last < w.sensitivity:
        return "below sensitivity"
    return ""


@dataclass(slots=True)
class LaserOutlook:
    """A transmitter whose laser shows wear, named so it can be replaced, with evidence."""

    device: str
    port: str
    lane: int
    serial: str  # "" when the history never saw one
    reason: str  # the wear verdict's sentence
    tx_drop_db: float | None
    bias_rise: float | None
    since: float | None  # the baseline it is judged against (first seen)
    tx_rate_db_per_day: float | None  # Tx power's robust slope since its last step
    receiver: str  # "device port" of the far receiver, "" when not known
    receiver_target_lost_at: float | None
    temperature_note: str = ""


def _history_note(d: Drift, samples: int) -> str:
    if d.reason is NoForecast.TOO_SHORT:
        return f"history too short for a trend ({samples} samples)"
    if d.reason is NoForecast.JUST_STEPPED:
        return "stepped recently; too little history since the step for a trend"
    return ""


def span_outlook(label: str, budget_db: float, tx: Series, rx: Series) -> SpanOutlook:
    """One direction of a span: its loss now against its budget, and its growth.

    "Now" is the median of the last few paired samples, the same figure growth ends on,
    so a span's first loss, growth and present loss always add up (a median over the
    whole window would mix a fault that has since been cleared into "measured").
    """
    losses = span_losses(tx, rx)
    v = judge_span_loss(losses[-GROWTH_SAMPLES:], budget_db)
    first = (float(np.median(losses[:GROWTH_SAMPLES]))
             if losses.size >= 2 * GROWTH_SAMPLES else None)
    growth = _growth(losses)
    return SpanOutlook(
        span=label, engineered_db=budget_db,
        measured_db=None if math.isnan(v.measured_db) else v.measured_db,
        excess_db=None if math.isnan(v.excess_db) else v.excess_db,
        verdict=v.verdict, growth_db=growth, samples=int(losses.size), first_db=first)


_NOW_RANK = {"dark": 0, "overloaded": 1, "below sensitivity": 2}


def soonest_first(lanes: list[LaneOutlook]) -> None:
    """What is wrong now first (dark, overloaded, below sensitivity), then the soonest
    forecast loss of the margin target, then lanes with no forecast, fastest moving first."""
    lanes.sort(key=lambda o: (_NOW_RANK.get(o.now_state, 3), o.target_lost_at is None,
                              o.target_lost_at or 0.0,
                              -abs(o.rate_db_per_day) if o.moving and o.rate_db_per_day
                              is not None else 0.0))


def most_grown_first(spans: list[SpanOutlook]) -> None:
    spans.sort(key=lambda s: -(s.growth_db if s.growth_db is not None else -1e9))
