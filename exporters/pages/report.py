"""The planners' report: gathers series from the reading history and the plant record,
asks the rule layer (rules.outlook) for each lane's and span's outlook, and formats them
as text and JSON.
"""

from __future__ import annotations

import time
from dataclasses import asdict

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.store.gather import lane_outlooks
from lightwarden.exporters.store.history import History
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.outlook import (
    DAY,
    PlannerReport,
    SpanOutlook,
    most_grown_first,
    soonest_first,
    span_outlook,
)
from lightwarden.rules.plant import Plant
from lightwarden.rules.spanloss import engineered_loss_db


def build_report(history: History, plant: Plant | None, targets: MarginTargets, now: float,
                 days: float = 90.0, horizon_days: float = 3650.0) -> PlannerReport:
    since = now - days * DAY
    lanes = lane_outlooks(history, plant, targets, now, days, horizon_days)
    soonest_first(lanes)
    spans: list[SpanOutlook] = []
    for sp in plant.spans if plant is not None else []:
        budget = engineered_loss_db(sp)
        for (td, tp), (rd, rp) in (((sp.a_device, sp.a_port), (sp.b_device, sp.b_port)),
                                   ((sp.b_device, sp.b_port), (sp.a_device, sp.a_port))):
            tx = history.series(td, tp, 1, Quantity.TX_POWER, since)
            rx = history.series(rd, rp, 1, Quantity.RX_POWER, since)
            spans.append(span_outlook(f"{td} {tp} -> {rd} {rp}", budget, tx, rx))
    most_grown_first(spans)
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
