"""The planners' report: gathers series from the reading history and the plant record,
asks the rule layer (rules.outlook) for each lane's and span's outlook, and formats them
as text and JSON (report_html.py writes the HTML and CSV).

Order: what is wrong now (dark, overloaded, below sensitivity), then the soonest
forecast loss of a margin target; lasers to replace are named by their own port and
serial, with the evidence; spans show first loss + growth = loss now.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import asdict

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.store.gather import lane_outlooks
from lightwarden.exporters.store.history import History
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.outlook import (
    DAY,
    LaneOutlook,
    LaserOutlook,
    PlannerReport,
    SpanOutlook,
    most_grown_first,
    series_drift,
    soonest_first,
    span_outlook,
)
from lightwarden.rules.plant import Plant
from lightwarden.rules.spanloss import engineered_loss_db


def build_report(history: History, plant: Plant | None, targets: MarginTargets, now: float,
                 days: float = 90.0, horizon_days: float = 3650.0,
                 progress: Callable[[int, int], None] | None = None) -> PlannerReport:
    """``progress(done, total)`` is told of each receiver lane read (for a progress bar)."""
    since = now - days * DAY
    lanes = lane_outlooks(history, plant, targets, now, days, horizon_days, progress)
    soonest_first(lanes)
    spans: list[SpanOutlook] = []
    lanes_of: dict[tuple[str, str], set[int]] = {}
    for w in history.rx_windows():
        lanes_of.setdefault((w.device, w.port), set()).add(w.lane)
    for sp in plant.spans if plant is not None else []:
        for direction, (td, tp), (rd, rp) in (
                ("a->b", (sp.a_device, sp.a_port), (sp.b_device, sp.b_port)),
                ("b->a", (sp.b_device, sp.b_port), (sp.a_device, sp.a_port))):
            # each direction against its own budget (a pad counts at its receiver only),
            # every lane of a multi-lane optic on its own
            budget = engineered_loss_db(sp, direction=direction)
            rx_lanes = sorted(lanes_of.get((rd, rp), set()) - {0}) or [1]
            for lane in rx_lanes:
                tx = history.series(td, tp, lane, Quantity.TX_POWER, since)
                rx = history.series(rd, rp, lane, Quantity.RX_POWER, since)
                where = f" lane {lane}" if len(rx_lanes) > 1 else ""
                if sp.wavelength_from == "assumed":
                    where += (f" (budget at an assumed {sp.wavelength_nm:.0f} nm: no PMD "
                              "known; set the span's wavelength_nm)")
                spans.append(span_outlook(f"{td} {tp} -> {rd} {rp}{where}", budget, tx, rx))
    most_grown_first(spans)
    lasers = [_laser(history, plant, o, since, now) for o in lanes if o.laser_worn]
    lasers.sort(key=lambda x: (x.receiver_target_lost_at is None,
                               x.receiver_target_lost_at or 0.0))
    return PlannerReport(generated_at=now, days=days, lanes=lanes, spans=spans, lasers=lasers)


def _laser(history: History, plant: Plant | None, o: LaneOutlook, since: float,
           now: float) -> LaserOutlook:
    """The transmitter feeding receiver ``o`` (its far end), named for replacement."""
    far = plant.far_end(o.device, o.port) if plant is not None else None
    dev, port = far if far is not None else (o.device, o.port)
    tx = history.series(dev, port, o.lane, Quantity.TX_POWER, since)
    d = series_drift(tx, now)
    base = history.baseline(dev, port, o.lane)
    from lightwarden.exporters.store.gather import history_advice_context

    ctx = history_advice_context(history, plant, o.device, o.port, o.lane, Quantity.RX_POWER,
                                 now, days=(now - since) / DAY)
    wear = ctx.wear
    return LaserOutlook(
        device=dev, port=port, lane=o.lane, serial=base.serial if base is not None else "",
        reason=wear.reason if wear is not None else "",
        tx_drop_db=wear.tx_drop_db if wear is not None else None,
        bias_rise=wear.bias_rise if wear is not None else None,
        since=wear.since if wear is not None else None,
        tx_rate_db_per_day=d.rate_per_day if d.moving else None,
        receiver=f"{o.device} {o.port}", receiver_target_lost_at=o.target_lost_at,
        temperature_note=wear.temperature_note if wear is not None else "")


def _clean(v: object) -> object:
    if isinstance(v, float):
        return None if not math.isfinite(v) else round(v, 6)
    return v


EMPTY = ("No receiver lanes in the history yet: the monitor has not kept a poll with "
         "optics (is it running, and is history enabled?).")


def report_json(report: PlannerReport) -> dict[str, object]:
    def clean(d: dict[str, object]) -> dict[str, object]:
        return {k: _clean(v) for k, v in d.items()}

    return {
        "generated_at": report.generated_at,
        "days": report.days,
        "note": "" if report.lanes else EMPTY,
        "lanes": [clean(asdict(o)) for o in report.lanes],
        "lasers": [clean(asdict(x)) for x in report.lasers],
        "spans": [clean(asdict(s)) for s in report.spans],
    }


def date(t: float | None) -> str:
    return "-" if t is None else time.strftime("%Y-%m-%d", time.gmtime(t))


def num(v: float | None, prec: int = 1) -> str:
    return "-" if v is None or not math.isfinite(v) else f"{v:.{prec}f}"


def rate_text(o: LaneOutlook) -> str:
    """A believed slope in dB/day to three significant figures; otherwise why there is none."""
    if o.now_state == "dark":
        return "-"
    if o.moving and o.rate_db_per_day is not None:
        return f"{o.rate_db_per_day:+.3g}"
    return {"": "-", "too short": "short", "just stepped": "stepped"}.get(
        o.no_forecast, o.no_forecast or "-")


def lane_note(o: LaneOutlook) -> str:
    if o.now_state == "dark":
        return "no light at the last poll: check the far transmitter and the patching"
    if o.now_state == "overloaded" and o.rx_power_dbm is not None and o.overload_dbm:
        return (f"{o.rx_power_dbm - o.overload_dbm:.1f} dB above overload "
                f"({o.overload_dbm:.1f} dBm, {o.window_source}): pad the receiver")
    if o.now_state == "below sensitivity" and o.rx_power_dbm is not None \
            and o.sensitivity_dbm is not None:
        return (f"{o.sensitivity_dbm - o.rx_power_dbm:.1f} dB below sensitivity "
                f"({o.sensitivity_dbm:.1f} dBm, {o.window_source})")
    if o.history_note:
        return o.history_note
    parts = []
    if o.last_step_at is not None and o.last_step_db is not None:
        parts.append(f"stepped {o.last_step_db:+.1f} dB on {date(o.last_step_at)}")
    if o.laser_worn:
        parts.append("feeding laser wearing (see lasers)")
    return "; ".join(parts)


def render_report(report: PlannerReport, limit: int = 50) -> str:
    lanes = report.lanes
    now_wrong = [o for o in lanes if o.now_state]
    dated = [o for o in lanes if not o.now_state and o.target_lost_at is not None]
    rest = [o for o in lanes if not o.now_state and o.target_lost_at is None]
    head = (f"{'DEVICE':<12} {'PORT':<7} {'L':>1} {'PMD':<13} {'RX dBm':>7} {'dB/day':>8} "
            f"{'TARGET LOST':>11} {'EDGE':>10}  NOTE")

    def row(o: LaneOutlook) -> str:
        return (f"{o.device:<12.12} {o.port:<7.7} {o.lane:>1} {o.pmd or '?':<13.13} "
                f"{num(o.rx_power_dbm, 2):>7} {rate_text(o):>8} "
                f"{date(o.target_lost_at):>11} {date(o.edge_reached_at):>10}  {lane_note(o)}")

    out = [f"lightwarden planners' report, {date(report.generated_at)}, "
           f"last {report.days:g} days (dates UTC)", ""]
    if not lanes:
        out.append(EMPTY)
        return "\n".join(out)
    out.append(f"Wrong now ({len(now_wrong)}):")
    out += [head] + [row(o) for o in now_wrong[:limit]] if now_wrong else ["  none"]
    out += ["", f"Forecast to leave the margin target, soonest first ({len(dated)}):"]
    out += [head] + [row(o) for o in dated[:limit]] if dated else ["  none"]
    reasons: dict[str, int] = {}
    for o in rest:
        word = o.no_forecast or "moving away"
        reasons[word] = reasons.get(word, 0) + 1
    if rest:
        summary = ", ".join(f"{n} {w}" for w, n in sorted(reasons.items(), key=lambda x: -x[1]))
        out += ["", f"No forecast for {len(rest)} lanes: {summary}."]
    out += ["", f"Lasers to replace ({len(report.lasers)}):"]
    if not report.lasers:
        out.append("  none shows wear")
    for x in report.lasers:
        evidence = [x.reason]
        if x.tx_rate_db_per_day is not None:
            evidence.append(f"Tx {x.tx_rate_db_per_day:+.3g} dB/day")
        if x.since is not None:
            evidence.append(f"baseline {date(x.since)}")
        when = (f"; its receiver {x.receiver} loses its margin target "
                f"{date(x.receiver_target_lost_at)}" if x.receiver_target_lost_at is not None
                else "")
        serial = f" (serial {x.serial})" if x.serial else ""
        out.append(f"  {x.device} {x.port} lane {x.lane}{serial}: {', '.join(evidence)}{when}")
    if report.spans:
        out += ["", "Spans, most grown first (first + growth = now, dB):",
                f"{'SPAN':<36} {'BUDGET':>6} {'FIRST':>6} {'GROWTH':>6} {'NOW':>6} "
                f"{'EXCESS':>6} VERDICT"]
        for s in report.spans[:limit]:
            out.append(f"{s.span:<36.36} {s.engineered_db:>6.1f} {num(s.first_db):>6} "
                       f"{num(s.growth_db):>6} {num(s.measured_db):>6} {num(s.excess_db):>6} "
                       f"{s.verdict}")
        if len(report.spans) > limit:
            out.append(f"... and {len(report.spans) - limit} more spans (use --json for all)")
    return "\n".join(out)
