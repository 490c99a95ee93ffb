"""The planners' report, and the history facts that alerts carry.

Reads the reading history (SQLite) and the plant record: for every receiver lane, how
fast it is moving and when it will run out of margin; for every span, its measured loss
against what it was built to lose and how much that has grown; for every transmitter,
whether it shows the usual signs of wear. All computation is in the rule layer
(rules.trend, rules.spanloss); this module only gathers series and formats.
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass

import numpy as np

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.history import History, RxWindow, Series
from lightwarden.exporters.plant import Plant
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.spanloss import engineered_loss_db, judge_span_loss, span_loss_growth
from lightwarden.rules.trend import fit_trend, forecast_crossing, laser_wear

DAY = 86400.0
#: samples at each end of a history compared for span loss growth
GROWTH_SAMPLES = 5
#: a trend drawn through less history than this is noise, not ageing: with DDM
#: readings good to a few tenths of a dB between samples, hours say nothing about months
MIN_TREND_SPAN_S = DAY
MIN_TREND_SAMPLES = 10


def _span_losses(tx: Series, rx: Series) -> np.ndarray:
    """Tx of one end minus Rx of the other, on the receiver's sample times.

    The two ends are different devices polled at different moments, so the far Tx is
    interpolated onto the Rx times (both change slowly compared with the sample step).
    """
    if len(tx) < 2 or len(rx) == 0:
        return np.empty(0)
    inside = (rx.times >= tx.times[0]) & (rx.times <= tx.times[-1])
    return np.interp(rx.times[inside], tx.times, tx.values) - rx.values[inside]


def _enough(s: Series) -> bool:
    return len(s) >= MIN_TREND_SAMPLES and float(s.times[-1] - s.times[0]) >= MIN_TREND_SPAN_S


def advice_context(history: History, plant: Plant | None, device: str, port: str, lane: int,
                   quantity: Quantity, now: float, days: float = 30.0,
                   own: Series | None = None) -> AdviceContext:
    """What history says about one reading: its rate, the feeding laser, the span.

    ``own`` is the reading's own series over the same days, when the caller has it.
    """
    since = now - days * DAY
    if own is None:
        own = history.series(device, port, lane, quantity, since)
    trend = fit_trend(own.times, own.values) if _enough(own) else None
    rate = trend.rate_per_day if trend is not None else None
    wear = growth = None
    wear_end = "near"
    tx_dev, tx_port = device, port
    if quantity is Quantity.RX_POWER:
        far = plant.far_end(device, port) if plant is not None else None
        if far is None:
            return AdviceContext(rate_per_day=rate)
        tx_dev, tx_port = far
        wear_end = "far"
    tx = history.series(tx_dev, tx_port, lane, Quantity.TX_POWER, since)
    bias = history.series(tx_dev, tx_port, lane, Quantity.BIAS, since)
    if len(tx) >= 2:
        bias_on_tx = (np.interp(tx.times, bias.times, bias.values) if len(bias) >= 2
                      else None)
        wear = laser_wear(tx.times, tx.values, bias_on_tx)
    if quantity is Quantity.RX_POWER:
        losses = _span_losses(tx, own)
        if losses.size >= 2 * GROWTH_SAMPLES:
            growth = span_loss_growth(losses[:GROWTH_SAMPLES], losses[-GROWTH_SAMPLES:])
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


def _outlook(history: History, plant: Plant | None, w: RxWindow, targets: MarginTargets,
             now: float, since: float, horizon_s: float) -> LaneOutlook:
    rx = history.series(w.device, w.port, w.lane, Quantity.RX_POWER, since)
    span_s = float(rx.times[-1] - rx.times[0]) if len(rx) else 0.0
    enough = _enough(rx)
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
    ctx = advice_context(history, plant, w.device, w.port, w.lane, Quantity.RX_POWER, now,
                         days=(now - since) / DAY, own=rx)
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


def build_report(history: History, plant: Plant | None, targets: MarginTargets, now: float,
                 days: float = 90.0, horizon_days: float = 3650.0) -> PlannerReport:
    since = now - days * DAY
    lanes = [_outlook(history, plant, w, targets, now, since, horizon_days * DAY)
             for w in history.rx_windows()]
    # Soonest trouble first; lanes with no forecast after, fastest falling first.
    lanes.sort(key=lambda o: (o.target_lost_at is None, o.target_lost_at or 0.0,
                              o.rate_db_per_day if o.rate_db_per_day is not None else 0.0))
    spans: list[SpanOutlook] = []
    for sp in plant.spans if plant is not None else []:
        budget = engineered_loss_db(sp)
        for (td, tp), (rd, rp) in (((sp.a_device, sp.a_port), (sp.b_device, sp.b_port)),
                                   ((sp.b_device, sp.b_port), (sp.a_device, sp.a_port))):
            tx = history.series(td, tp, 1, Quantity.TX_POWER, since)
            rx = history.series(rd, rp, 1, Quantity.RX_POWER, since)
            losses = _span_losses(tx, rx)
            v = judge_span_loss(losses, budget)
            growth = (span_loss_growth(losses[:GROWTH_SAMPLES], losses[-GROWTH_SAMPLES:])
                      if losses.size >= 2 * GROWTH_SAMPLES else None)
            spans.append(SpanOutlook(
                span=f"{td} {tp} -> {rd} {rp}", engineered_db=budget,
                measured_db=None if math.isnan(v.measured_db) else v.measured_db,
                excess_db=None if math.isnan(v.excess_db) else v.excess_db,
                verdict=v.verdict, growth_db=growth, samples=v.samples))
    spans.sort(key=lambda s: -(s.growth_db if s.growth_db is not None else -1e9))
    return PlannerReport(generated_at=now, days=days, lanes=lanes, spans=spans)


def report_json(report: PlannerReport) -> dict[str, object]:
    def clean(d: dict[str, object]) -> dict[str, object]:
        return {k: (round(v, 4) if isinstance(v, float) else v) for k, v in d.items()}

    return {
        "generated_at": report.generated_at,
        "days": report.days,
        "lanes": [clean(asdict(o)) for o in report.lanes],
        "spans": [clean(asdict(s)) for s in report.spans],
    }


def _date(t: float | None) -> str:
    return "-" if t is None else time.strftime("%Y-%m-%d", time.gmtime(t))


def _f(v: float | None, prec: int = 2) -> str:
    return "-" if v is None else f"{v:.{prec}f}"


def render_report(report: PlannerReport, limit: int = 50) -> str:
    out = [f"lightwarden planners' report, {_date(report.generated_at)}, "
           f"last {report.days:g} days", "",
           "Receivers, soonest out of margin first (dates UTC):",
           f"{'DEVICE':<12} {'PORT':<7} {'L':>1} {'PMD':<13} {'RX dBm':>7} {'dB/day':>7} "
           f"{'TARGET LOST':>11} {'EDGE':>10} {'N':>4}  LASER"]
    for o in report.lanes[:limit]:
        out.append(
            f"{o.device:<12.12} {o.port:<7.7} {o.lane:>1} {o.pmd or '?':<13.13} "
            f"{_f(o.rx_power_dbm):>7} {_f(o.rate_db_per_day, 3):>7} "
            f"{_date(o.target_lost_at):>11} {_date(o.edge_reached_at):>10} {o.samples:>4}  "
            + (o.history_note or (("worn: " if o.laser_worn else "") + o.laser_note))
        )
    if len(report.lanes) > limit:
        out.append(f"... and {len(report.lanes) - limit} more lanes (use --json for all)")
    if report.spans:
        out += ["", "Spans, most grown first:",
                f"{'SPAN':<36} {'BUDGET':>6} {'MEAS':>6} {'EXCESS':>6} {'GROWTH':>6} VERDICT"]
        for s in report.spans:
            out.append(f"{s.span:<36.36} {s.engineered_db:>6.2f} {_f(s.measured_db):>6} "
                       f"{_f(s.excess_db):>6} {_f(s.growth_db):>6} {s.verdict}")
    return "\n".join(out)
