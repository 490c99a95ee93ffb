"""What history says about a lane and a span: rates, forecasts, laser wear, span growth.

Pure computation over series that the caller fetched (exporters/store reads them); the
planners' report and the facts that alerts carry both come from here, so the two never
disagree.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from lightwarden.collector.readings import Quantity
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.spanloss import judge_span_loss, span_loss_growth
from lightwarden.rules.trend import fit_trend, forecast_crossing, laser_wear

DAY = 86400.0
#: samples at each end of a history compared for span loss growth
GROWTH_SAMPLES = 5
#: a trend drawn through less history than this is noise, not ageing: with DDM
#: readings good to a few tenths of a dB between samples, hours say nothing about months
MIN_TREND_SPAN_S = DAY
MIN_TREND_SAMPLES = 10


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


def enough_for_trend(s: Series) -> bool:
    return len(s) >= MIN_TREND_SAMPLES and float(s.times[-1] - s.times[0]) >= MIN_TREND_SPAN_S


def _growth(losses: np.ndarray) -> float | None:
    if losses.size < 2 * GROWTH_SAMPLES:
        return None
    return span_loss_growth(losses[:GROWTH_SAMPLES], losses[-GROWTH_SAMPLES:])


def advice_context(quantity: Quantity, own: Series, tx: Series | None, bias: Series | None,
                   wear_end: str) -> AdviceContext:
    """History facts for one reading.

    ``own`` is the reading's own series; ``tx`` and ``bias`` are those of the laser that
    feeds it (the far end's for Rx power, its own for Tx power and bias), None when that
    laser is not known (no plant record for an Rx port).
    """
    trend = fit_trend(own.times, own.values) if enough_for_trend(own) else None
    rate = trend.rate_per_day if trend is not None else None
    if tx is None:
        return AdviceContext(rate_per_day=rate)
    wear = growth = None
    if len(tx) >= 2:
        bias_on_tx = (np.interp(tx.times, bias.times, bias.values)
                      if bias is not None and len(bias) >= 2 else None)
        wear = laser_wear(tx.times, tx.values, bias_on_tx)
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
    rate_db_per_day: float | None
    samples: int
    #: when the margin target will no longer be met / when the edge itself is reached
    target_lost_at: float | None
    edge_reached_at: float | None
    laser_worn: bool | None
    laser_note: str
    history_note: str = ""


@dataclass(slots=True)
class SpanOutlook:
    span: str  # "A port -> B port"
    engineered_db: float
    measured_db: float | None
    excess_db: float | None
    verdict: str
    growth_db: float | None
    samples: int


@dataclass(slots=True)
class PlannerReport:
    generated_at: float
    days: float
    lanes: list[LaneOutlook]
    spans: list[SpanOutlook]


def lane_outlook(w: RxWindow, rx: Series, ctx: AdviceContext, targets: MarginTargets,
                 now: float, horizon_s: float) -> LaneOutlook:
    """One receiver lane's outlook: its rate and when it loses its target and its edge."""
    span_s = float(rx.times[-1] - rx.times[0]) if len(rx) else 0.0
    enough = enough_for_trend(rx)
    trend = fit_trend(rx.times, rx.values) if enough else None
    note = "" if enough else (f"history too short for a trend ({len(rx)} samples over "
                              f"{span_s / 3600:.1f} h; needs {MIN_TREND_SAMPLES} over "
                              f"{MIN_TREND_SPAN_S / 3600:.0f} h)")
    target_at = edge_at = None
    if trend is not None and trend.slope_per_s < 0 and w.sensitivity is not None:
        target_at = forecast_crossing(rx.times, rx.values, w.sensitivity + targets.sensitivity_db,
                                      now, horizon_s=horizon_s)
        edge_at = forecast_crossing(rx.times, rx.values, w.sensitivity, now,
                                    horizon_s=horizon_s)
    elif trend is not None and trend.slope_per_s > 0 and w.overload is not None:
        target_at = forecast_crossing(rx.times, rx.values, w.overload - targets.overload_db,
                                      now, horizon_s=horizon_s)
        edge_at = forecast_crossing(rx.times, rx.values, w.overload, now, horizon_s=horizon_s)
    return LaneOutlook(
        device=w.device, port=w.port, lane=w.lane, pmd=w.pmd,
        rx_power_dbm=float(rx.values[-1]) if len(rx) else None,
        sensitivity_dbm=w.sensitivity, overload_dbm=w.overload, window_source=w.source,
        rate_db_per_day=trend.rate_per_day if trend is not None else None,
        samples=len(rx), target_lost_at=target_at, edge_reached_at=edge_at,
        laser_worn=ctx.wear.worn if ctx.wear is not None else None,
        laser_note=(f"{ctx.wear_end} end: {ctx.wear.reason or 'no sign of wear'}"
                    if ctx.wear is not None else "far end unknown (no plant record)"),
        history_note=note,
    )


def span_outlook(label: str, budget_db: float, tx: Series, rx: Series) -> SpanOutlook:
    """One direction of a span: measured loss against its budget, and its growth."""
    losses = span_losses(tx, rx)
    v = judge_span_loss(losses, budget_db)
    return SpanOutlook(
        span=label, engineered_db=budget_db,
        measured_db=None if math.isnan(v.measured_db) else v.measured_db,
        excess_db=None if math.isnan(v.excess_db) else v.excess_db,
        verdict=v.verdict, growth_db=_growth(losses), samples=v.samples)


def soonest_first(lanes: list[LaneOutlook]) -> None:
    """Soonest trouble first; lanes with no forecast after, fastest falling first."""
    lanes.sort(key=lambda o: (o.target_lost_at is None, o.target_lost_at or 0.0,
                              o.rate_db_per_day if o.rate_db_per_day is not None else 0.0))


def most_grown_first(spans: list[SpanOutlook]) -> None:
    spans.sort(key=lambda s: -(s.growth_db if s.growth_db is not None else -1e9))
