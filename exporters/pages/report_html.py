"""The planners' report as files: report.html with inline SVG charts, and report.csv.

One chart per listed item (lanes wrong now, lanes with a forecast, the receivers of
lasers to replace): Rx history (hourly or finer averages) against the window bands
(sensitivity and overload edges, the margin targets), the forecast line from now to the
target-lost date and the interval the slope allows. A fleet summary: margin to the
nearer edge as a histogram, and counts by state and by PMD. Plain SVG written here: no
script, no external file, so the page opens offline and can be mailed.
"""

from __future__ import annotations

import csv
import html
import math
from collections import Counter
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.pages.report import date, lane_note, num, rate_text
from lightwarden.exporters.store.history import History
from lightwarden.rules.outlook import DAY, LaneOutlook, PlannerReport

W, H, PAD = 640, 220, 40

CSV_COLUMNS = ("device", "port", "lane", "pmd", "now_state", "rx_power_dbm",
               "sensitivity_dbm", "overload_dbm", "window_source", "rate_db_per_day",
               "rate_low", "rate_high", "target_lost_at", "target_earliest", "target_latest",
               "edge_reached_at", "no_forecast", "laser_worn", "samples")


def _esc(s: object) -> str:
    return html.escape(str(s), quote=True)


def lane_chart(o: LaneOutlook, times: np.ndarray, values: np.ndarray, now: float,
               target_db: tuple[float, float]) -> str:
    """SVG of one receiver: history, window bands, forecast with its interval."""
    t_end = now
    for t in (o.target_lost_at, o.target_latest, o.edge_reached_at):
        if t is not None and math.isfinite(t):
            t_end = max(t_end, t)
    t_end = min(t_end, now + 730 * DAY)  # a forecast years out is drawn to two years
    t0 = float(times[0]) if times.size else now - DAY
    levels = [float(v) for v in values] if values.size else [-10.0]
    for e in (o.sensitivity_dbm, o.overload_dbm):
        if e is not None:
            levels.append(e)
    lo, hi = min(levels) - 1.0, max(levels) + 1.0
    span_t = max(t_end - t0, 1.0)

    def x(t: float) -> float:
        return PAD + (W - 2 * PAD) * (t - t0) / span_t

    def y(v: float) -> float:
        return H - PAD + (2 * PAD - H) * (v - lo) / (hi - lo)

    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{W}" height="{H}" '
             f'role="img" aria-label="Rx power of {_esc(o.device)} {_esc(o.port)}">',
             f'<rect x="{PAD}" y="{PAD / 2}" width="{W - 2 * PAD}" height="{H - 1.5 * PAD}" '
             'fill="#fafafa" stroke="#ccc"/>']
    over_target, sens_target = target_db
    if o.overload_dbm is not None:  # the overload band and its margin target
        parts.append(_band(y(hi), y(o.overload_dbm), "#f4c7c3", "above overload"))
        parts.append(_band(y(o.overload_dbm), y(o.overload_dbm - over_target), "#fce8b2",
                           "inside the overload margin target"))
    if o.sensitivity_dbm is not None:
        parts.append(_band(y(o.sensitivity_dbm), y(lo), "#f4c7c3", "below sensitivity"))
        parts.append(_band(y(o.sensitivity_dbm + sens_target), y(o.sensitivity_dbm),
                           "#fce8b2", "inside the sensitivity margin target"))
    if times.size:
        pts = " ".join(f"{x(float(t)):.1f},{y(float(v)):.1f}" for t, v in zip(times, values,
                                                                            strict=True))
        parts.append(f'<polyline points="{pts}" fill="none" stroke="#1a73e8" '
                     'stroke-width="1.2"><title>Rx power, dBm</title></polyline>')
    if o.target_lost_at is not None and o.rx_power_dbm is not None \
            and o.rate_db_per_day is not None:
        edge = (o.sensitivity_dbm + sens_target if o.rate_db_per_day < 0
                and o.sensitivity_dbm is not None else
                (o.overload_dbm - over_target if o.overload_dbm is not None else None))
        if edge is not None:
            start_v = edge - o.rate_db_per_day * (o.target_lost_at - now) / DAY
            if o.target_earliest is not None:
                far = o.target_latest if o.target_latest is not None else t_end
                parts.append(
                    f'<polygon points="{x(now):.1f},{y(start_v):.1f} '
                    f'{x(o.target_earliest):.1f},{y(edge):.1f} {x(far):.1f},{y(edge):.1f}" '
                    'fill="#1a73e8" fill-opacity="0.15"><title>the dates the slope\'s 95 % '
                    'interval allows</title></polygon>')
            parts.append(f'<line x1="{x(now):.1f}" y1="{y(start_v):.1f}" '
                         f'x2="{x(o.target_lost_at):.1f}" y2="{y(edge):.1f}" stroke="#1a73e8" '
                         'stroke-dasharray="5,3"><title>forecast</title></line>')
    parts.append(f'<line x1="{x(now):.1f}" y1="{PAD / 2}" x2="{x(now):.1f}" y2="{H - PAD}" '
                 'stroke="#666" stroke-dasharray="2,2"><title>now</title></line>')
    for v in (lo + 1.0, hi - 1.0):
        parts.append(f'<text x="{PAD - 4}" y="{y(v) + 4:.1f}" font-size="10" '
                     f'text-anchor="end">{v:.0f}</text>')
    parts.append(f'<text x="{PAD}" y="{H - PAD + 14}" font-size="10">{date(t0)}</text>')
    parts.append(f'<text x="{W - PAD}" y="{H - PAD + 14}" font-size="10" '
                 f'text-anchor="end">{date(t_end)}</text>')
    parts.append(f'<text x="{W / 2}" y="{H - 6}" font-size="10" text-anchor="middle">'
                 'Rx power, dBm (blue); red: past the edge, amber: inside the margin '
                 'target</text></svg>')
    return "".join(parts)


def _band(y_top: float, y_bottom: float, colour: str, title: str) -> str:
    top, bottom = min(y_top, y_bottom), max(y_top, y_bottom)
    top = max(top, PAD / 2)
    bottom = min(bottom, H - PAD)
    if bottom <= top:
        return ""
    return (f'<rect x="{PAD}" y="{top:.1f}" width="{W - 2 * PAD}" height="{bottom - top:.1f}" '
            f'fill="{colour}" fill-opacity="0.7"><title>{_esc(title)}</title></rect>')


def _bars(title: str, counts: Sequence[tuple[str, int]]) -> str:
    """A horizontal bar chart of labelled counts."""
    row_h = 18
    h = PAD + row_h * max(len(counts), 1)
    top = max((n for _, n in counts), default=1) or 1
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{W}" height="{h}" role="img" '
             f'aria-label="{_esc(title)}"><text x="4" y="14" font-size="12">{_esc(title)}'
             '</text>']
    for i, (label, n) in enumerate(counts):
        yy = PAD / 2 + 8 + i * row_h
        width = (W - 260) * n / top
        parts.append(f'<text x="150" y="{yy + 12}" font-size="11" text-anchor="end">'
                     f'{_esc(label)}</text><rect x="156" y="{yy}" width="{width:.1f}" '
                     f'height="{row_h - 4}" fill="#1a73e8"/><text x="{160 + width:.1f}" '
                     f'y="{yy + 12}" font-size="11">{n}</text>')
    parts.append("</svg>")
    return "".join(parts)


def margin_histogram(lanes: Sequence[LaneOutlook]) -> list[tuple[str, int]]:
    """Lanes by margin to the nearer window edge, in 1 dB bins ("< 0" past the edge)."""
    margins = []
    for o in lanes:
        if o.rx_power_dbm is None:
            continue
        near = [m for m in ((o.overload_dbm - o.rx_power_dbm) if o.overload_dbm is not None
                            else None,
                            (o.rx_power_dbm - o.sensitivity_dbm) if o.sensitivity_dbm
                            is not None else None) if m is not None]
        if near:
            margins.append(min(near))
    bins: Counter[str] = Counter()
    for m in margins:
        bins["< 0 dB" if m < 0 else (">= 10 dB" if m >= 10 else
                                     f"{math.floor(m)}-{math.floor(m) + 1} dB")] += 1
    order = ["< 0 dB", *[f"{k}-{k + 1} dB" for k in range(10)], ">= 10 dB"]
    return [(k, bins[k]) for k in order if bins[k]]


def render_html(report: PlannerReport, history: History, target_db: tuple[float, float]
                ) -> str:
    now = report.generated_at
    since = now - report.days * DAY
    listed = [o for o in report.lanes if o.now_state or o.target_lost_at is not None]
    laser_rx = {x.receiver for x in report.lasers}
    listed += [o for o in report.lanes if f"{o.device} {o.port}" in laser_rx
               and o not in listed]
    out = ["<!doctype html><html><head><meta charset='utf-8'>",
           f"<title>lightwarden planners' report {date(now)}</title>",
           "<style>body{font-family:sans-serif;max-width:60em;margin:auto}"
           "table{border-collapse:collapse}td,th{padding:2px 6px;border-bottom:1px solid #ddd;"
           "text-align:left}.n{text-align:right}</style></head><body>",
           f"<h1>Planners' report, {date(now)}</h1>",
           f"<p>Last {report.days:g} days of history; dates UTC. Forecasts use the robust "
           "slope since each receiver's last step, with the dates its 95 % interval allows."
           "</p>"]
    if not report.lanes:
        out.append("<p>No receiver lanes in the history yet: the monitor has not kept a poll "
                   "with optics (is it running, and is history enabled?).</p></body></html>")
        return "".join(out)
    out.append("<h2>Fleet</h2>")
    out.append(_bars("Receivers by margin to the nearer edge", margin_histogram(report.lanes)))
    states = Counter(o.now_state or ("forecast to leave target" if o.target_lost_at
                                     else "steady") for o in report.lanes)
    out.append(_bars("Receivers by state", sorted(states.items(), key=lambda x: -x[1])))
    pmds = Counter(o.pmd or "unknown" for o in report.lanes)
    out.append(_bars("Receivers by PMD", sorted(pmds.items(), key=lambda x: -x[1])))
    out.append(f"<h2>Lasers to replace ({len(report.lasers)})</h2>")
    if report.lasers:
        out.append("<table><tr><th>transmitter</th><th>serial</th><th>evidence</th>"
                   "<th>its receiver loses its target</th></tr>")
        for x in report.lasers:
            ev = x.reason + (f"; Tx {x.tx_rate_db_per_day:+.3g} dB/day"
                             if x.tx_rate_db_per_day is not None else "")
            out.append(f"<tr><td>{_esc(x.device)} {_esc(x.port)} lane {x.lane}</td>"
                       f"<td>{_esc(x.serial or '-')}</td><td>{_esc(ev)}</td>"
                       f"<td>{_esc(x.receiver)} {date(x.receiver_target_lost_at)}</td></tr>")
        out.append("</table><p>Laser safety: never look into a fibre end or an open port; "
                   "disable the transmitter or cap the port before handling, and follow local "
                   "codes and the site's laser-safety procedures.</p>")
    else:
        out.append("<p>None shows wear.</p>")
    out.append(f"<h2>Receivers to act on ({len(listed)})</h2>")
    for o in listed:
        s = history.series(o.device, o.port, o.lane, Quantity.RX_POWER, since)
        out.append(f"<h3>{_esc(o.device)} {_esc(o.port)} lane {o.lane} "
                   f"({_esc(o.pmd or '?')})</h3><p>Rx {num(o.rx_power_dbm, 2)} dBm, "
                   f"{_esc(rate_text(o))} dB/day; target lost {date(o.target_lost_at)} "
                   f"(between {date(o.target_earliest)} and {date(o.target_latest)}), edge "
                   f"{date(o.edge_reached_at)}. {_esc(lane_note(o))}</p>")
        out.append(lane_chart(o, s.times, s.values, now, target_db))
    out.append("<h2>Spans</h2><table><tr><th>span</th><th class=n>budget</th>"
               "<th class=n>first</th><th class=n>growth</th><th class=n>now</th>"
               "<th>verdict</th></tr>")
    for sp in report.spans:
        out.append(f"<tr><td>{_esc(sp.span)}</td><td class=n>{sp.engineered_db:.1f}</td>"
                   f"<td class=n>{num(sp.first_db)}</td><td class=n>{num(sp.growth_db)}</td>"
                   f"<td class=n>{num(sp.measured_db)}</td><td>{_esc(sp.verdict)}</td></tr>")
    out.append("</table></body></html>")
    return "\n".join(out)


def write_csv(report: PlannerReport, path: Path) -> None:
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(CSV_COLUMNS)
        for o in report.lanes:
            row = []
            for c in CSV_COLUMNS:
                v = getattr(o, c)
                if c.endswith("_at") or c in ("target_earliest", "target_latest"):
                    v = date(v) if v is not None else ""
                elif isinstance(v, float):
                    v = f"{v:.4g}" if math.isfinite(v) else ""
                elif v is None:
                    v = ""
                row.append(v)
            w.writerow(row)


def write_report_dir(report: PlannerReport, history: History, out: Path,
                     target_db: tuple[float, float] = (3.0, 3.0)) -> list[Path]:
    """Write report.html and report.csv into ``out`` (made if missing); returns the paths."""
    out.mkdir(parents=True, exist_ok=True)
    page = out / "report.html"
    page.write_text(render_html(report, history, target_db), encoding="utf-8")
    table = out / "report.csv"
    write_csv(report, table)
    return [page, table]
