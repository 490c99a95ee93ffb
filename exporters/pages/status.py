"""The status page (`/`) and its JSON twin (`/api/optics`): worst optics first.

Built per request from the monitor's latest view of each device; the rows are the same
ones `lightwarden check` prints, so the page, the JSON and the CLI never disagree.
"""

from __future__ import annotations

import json
import time
from html import escape

from lightwarden.exporters.pages.budget import mount as mount_budget
from lightwarden.exporters.pages.http import HttpRequest, HttpServer, Response
from lightwarden.exporters.pages.report import build_report, render_report, report_json
from lightwarden.exporters.pages.report_html import render_html
from lightwarden.exporters.pages.rows import OpticRow, optic_rows, worst_first
from lightwarden.exporters.pages.view import MonitorView
from lightwarden.rules.advice import LASER_CAUTION
from lightwarden.rules.consistency import Finding
from lightwarden.rules.findings import AlertEvent, AlertSeverity, Severity
from lightwarden.rules.outlook import PlannerReport

#: Row colour per rung of the one severity order (alerts and link issues use it too).
_CLASS = {
    Severity.NONE: "ok",
    Severity.INFO: "unknown",
    Severity.WARNING: "warn",
    Severity.CRITICAL: "crit",
}


def _alert_class(severity: AlertSeverity) -> str:
    return _CLASS[severity.level]


class StatusPage:
    def __init__(self, monitor: MonitorView) -> None:
        self.monitor = monitor

    def mount(self, server: HttpServer) -> None:
        server.add_route("/", self.page)
        server.add_route("/api/optics", self.api)
        server.add_route("/report", self.report_text)
        server.add_route("/report.html", self.report_html)
        server.add_route("/api/report", self.report_api)
        mount_budget(server)

    def rows(self) -> tuple[list[OpticRow], list[dict[str, object]]]:
        rows: list[OpticRow] = []
        devices: list[dict[str, object]] = []
        # the monitor's clock where it has one (ages then follow its time)
        now = getattr(self.monitor, "clock", time.time)()
        for name, view in sorted(self.monitor.views.items()):
            o = view.outcome
            last = view.assessment or view.last_good
            devices.append({"device": name, "health": view.health, "reason": o.reason,
                            "since": view.health_since,
                            "up": view.health != "down",
                            "error": o.error, "error_kind": o.error_kind,
                            "polled_at": o.started_at,
                            "last_success_at": last.batch.taken_at if last else None})
            if view.assessment is not None:
                rows.extend(optic_rows(view.assessment, self.monitor.targets, view.contexts,
                                       view.links))
            elif view.last_good is not None:
                # The last readings we have, marked with their age: never shown as fresh.
                age = view.stale_for(now)
                for r in optic_rows(view.last_good, self.monitor.targets):
                    r.stale_s = age
                    stale = f"stale: read {_age(age)} ago"
                    r.value_notes.insert(0, stale)
                    r.notes.insert(0, stale)
                    rows.append(r)
        worst_first(rows, self.monitor.targets)
        return rows, devices

    def api(self, _req: HttpRequest) -> Response:
        rows, devices = self.rows()
        alerts = [
            {"alertname": a.alertname, "severity": a.severity.value, "device": a.device,
             "port": a.port, "lane": a.lane,
             "quantity": "" if a.quantity is None else a.quantity.label, "summary": a.summary,
             "advice": a.advice, "caution": a.caution}
            | ({"kind": a.finding, "far_device": a.far_device, "far_port": a.far_port}
               if a.finding else {})
            for a in self.monitor.open_alerts()
        ]
        links = [finding_json(i) for i in self.monitor.link_issues()]
        doc = {"devices": devices, "optics": [r.as_json() for r in rows], "alerts": alerts,
               "links": links}
        return 200, "application/json", json.dumps(doc).encode()

    def _report(self) -> PlannerReport | None:
        m = self.monitor
        if m.history is None:
            return None
        return build_report(m.history, m.plant_with_history(), m.targets, time.time())

    def report_text(self, _req: HttpRequest) -> Response:
        report = self._report()
        if report is None:
            return 404, "text/plain; charset=utf-8", b"no history kept by this monitor\n"
        return 200, "text/plain; charset=utf-8", render_report(report, limit=500).encode()

    def report_html(self, _req: HttpRequest) -> Response:
        m = self.monitor
        report = self._report()
        if report is None or m.history is None:
            return 404, "text/plain; charset=utf-8", b"no history kept by this monitor\n"
        page = render_html(report, m.history, (m.targets.overload_db, m.targets.sensitivity_db))
        return 200, "text/html; charset=utf-8", page.encode()

    def report_api(self, _req: HttpRequest) -> Response:
        report = self._report()
        if report is None:
            return 404, "application/json", b'{"error": "no history kept by this monitor"}'
        return 200, "application/json", json.dumps(report_json(report)).encode()

    def page(self, _req: HttpRequest) -> Response:
        rows, devices = self.rows()
        site = escape(self.monitor.site)
        out = [
            "<!doctype html><html><head><meta charset='utf-8'>",
            f"<title>lightwarden: {site}</title>",
            "<meta http-equiv='refresh' content='15'>",
            "<style>body{font:14px system-ui,sans-serif;margin:1.5em}"
            "table{border-collapse:collapse}td,th{padding:2px 8px;text-align:right}"
            "td.l,th.l{text-align:left}tr.crit{background:#f8d0d0}tr.warn{background:#fbeec0}"
            "td{white-space:nowrap}tr.unknown{background:#e4e4e4}"
            ".caution{border:1px solid #c60;padding:.5em;max-width:60em}</style></head><body>",
            f"<h1>lightwarden: {site}</h1>",
            f"<p>{len(rows)} optic lanes on {len(devices)} devices, worst first; "
            f"page built {escape(time.strftime('%Y-%m-%d %H:%M:%S'))}.</p>",
        ]
        trouble = [d for d in devices if d["health"] != "up"]
        if trouble:
            out.append("<h2>Devices not fully read</h2><ul>")
            out += [f"<li>{escape(str(d['device']))}: <b>{escape(str(d['health']))}</b> "
                    f"since {escape(_clock(d['since']))}: {escape(str(d['reason']))}</li>"
                    for d in trouble]
            out.append("</ul>")
        alerts = list(self.monitor.open_alerts())
        if alerts:
            out.append("<h2>Open alerts</h2><table><tr><th class=l>alert</th><th class=l>"
                       "where</th><th class=l>summary</th><th class=l>advice</th></tr>")
            for a in sorted(alerts, key=lambda a: (-a.severity.level, a.key)):
                out.append(
                    f"<tr class={_alert_class(a.severity)}>"
                    f"<td class=l>{escape(a.alertname)}</td>"
                    f"<td class=l>{escape(_where(a))}</td>"
                    f"<td class=l>{escape(a.summary)}</td><td class=l>{escape(a.advice)}</td>"
                    "</tr>"
                )
            out.append("</table>")
        links = self.monitor.link_issues()
        if links:
            out.append("<h2>Optics and plant that do not belong together</h2><table><tr>"
                       "<th class=l>finding</th><th class=l>severity</th><th class=l>what</th>"
                       "<th class=l>advice</th></tr>")
            out += [f"<tr class={_CLASS[i.severity]}><td class=l>{escape(i.kind.value)}</td>"
                    f"<td class=l>{escape(i.severity.word)}</td>"
                    f"<td class=l>{escape(i.text)}</td><td class=l>{escape(i.advice)}</td></tr>"
                    for i in links]
            out.append("</table>")
        out.append(
            "<h2>Optics</h2><table><tr><th class=l>device</th><th class=l>port</th>"
            "<th>lane</th><th class=l>PMD</th><th>Rx dBm</th><th>Tx dBm</th><th>bias mA</th>"
            "<th>temp °C</th><th>overload</th><th>sensitivity</th><th>to overload dB</th>"
            "<th>to sensitivity dB</th><th class=l>edges from</th>"
            "<th class=l>module levels (Rx)</th><th class=l>condition</th>"
            "<th class=l>notes</th></tr>"
        )
        for r in rows:
            out.append(
                f"<tr class={_CLASS[r.severity]}><td class=l>{escape(r.device)}</td>"
                f"<td class=l>{escape(r.port)}</td><td>{r.lane}</td>"
                f"<td class=l>{escape(r.pmd or '?')}</td>"
                + "".join(f"<td>{_n(v)}</td>" for v in (
                    r.rx_power_dbm, r.tx_power_dbm, r.bias_ma, r.temperature_c,
                    r.rx_overload_dbm, r.rx_sensitivity_dbm, r.margin_to_overload_db,
                    r.margin_to_sensitivity_db))
                + f"<td class=l>{escape(_edge_sources(r))}</td>"
                f"<td class=l>{escape(_levels(r))}</td>"
                f"<td class=l>{escape(_condition(r))}</td>"
                f"<td class=l>{escape('; '.join(r.notes))}</td></tr>"
            )
        out.append("</table>")
        out.append(f"<p class=caution>{escape(LASER_CAUTION)}</p>")
        out.append("</body></html>")
        return 200, "text/html; charset=utf-8", "".join(out).encode()


def finding_json(f: Finding) -> dict[str, object]:
    """One consistency finding as the JSON API and `check --json` show it."""
    return {"kind": f.kind.value, "severity": f.severity.word, "device": f.device,
            "port": f.port, "far_device": f.far_device, "far_port": f.far_port,
            "text": f.text, "advice": f.advice, "caution": LASER_CAUTION}


def _where(a: AlertEvent) -> str:
    if a.quantity is None:
        far = f" / {a.far_device} {a.far_port}" if a.far_device else ""
        return f"{a.device} {a.port}{far}"
    return f"{a.device} {a.port} lane {a.lane}"


def _age(seconds: float | None) -> str:
    s = 0 if seconds is None else int(seconds)
    if s < 120:
        return f"{s} s"
    if s < 7200:
        return f"{s // 60} min"
    return f"{s // 3600} h"


def _clock(at: object) -> str:
    if not isinstance(at, int | float) or not at:
        return "?"
    return time.strftime("%Y-%m-%d %H:%M:%S", time.localtime(at))


def _edge_sources(r: OpticRow) -> str:
    """Who declared the margin edges, e.g. "standard" or "sensitivity site, overload
    standard"."""
    lo = r.rx_edges.get("sensitivity", {}).get("source")
    hi = r.rx_edges.get("overload", {}).get("source")
    if lo == hi:
        return str(lo or r.window_source)
    return f"sensitivity {lo or '–'}, overload {hi or '–'}"


def _levels(r: OpticRow) -> str:
    """The declared Rx levels beside the margin edges: "alarm -18.0/+2.5, warning
    -16.0/+0.5 (module)"."""
    e = r.rx_edges
    parts, sources = [], set()
    for word, lo, hi in (("alarm", "low_alarm", "high_alarm"),
                         ("warning", "low_warning", "high_warning")):
        if lo in e or hi in e:
            parts.append(f"{word} {_lv(e.get(lo))}/{_lv(e.get(hi))}")
            sources |= {str(x["source"]) for x in (e.get(lo), e.get(hi)) if x}
    if not parts:
        return "–"
    return ", ".join(parts) + f" ({', '.join(sorted(sources))})"


def _lv(edge: dict[str, object] | None) -> str:
    v = edge.get("value") if edge else None
    return f"{v:+.1f}" if isinstance(v, float) else "–"


def _condition(r: OpticRow) -> str:
    """The condition, with the edge it is about and who declared it."""
    e = r.edge
    if not e or r.condition == "healthy":
        return r.condition
    return f"{r.condition} ({e.get('source')} {str(e.get('name', '')).replace('_', ' ')})"


def _n(v: float | None) -> str:
    return "–" if v is None else f"{v:.2f}"
