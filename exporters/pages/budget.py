"""Will a link not yet built close, and with which pad? ``lightwarden budget``,
``/api/budget`` and the ``/budget`` page, one set of options for all three.

The arithmetic is rules/budget.py's (and rules/pads.py's worst-case pad rule, the one
live links use); this module only reads options, looks the PMDs up and prints.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from html import escape
from urllib.parse import urlencode

from lightwarden.exporters.pages.http import HttpRequest, HttpServer, Response
from lightwarden.rules.budget import BudgetPlan, SpanPlan, plan_link
from lightwarden.rules.catalogue import Catalogue, PmdSpec, default_catalogue
from lightwarden.rules.pads import STOCKED_PADS_DB, PadTargets
from lightwarden.rules.spanloss import DEFAULT_COEFFICIENTS, PlanningCoefficients

EXIT_OK, EXIT_FAILS, EXIT_USAGE = 0, 1, 2


class BudgetError(ValueError):
    """A bad option; the message names it."""


def _spec(catalogue: Catalogue, option: str, name: str, fibre: str) -> PmdSpec:
    # A PMD with rows per fibre type (1000BASE-LX launches less on multimode) takes the
    # row for this span's fibre.
    spec = catalogue.lookup(name, fibre=fibre)
    if spec is None:
        reason = catalogue.not_judged_reason(name)
        raise BudgetError(f"{option}: PMD {name!r} is "
                          + (f"not an optical PMD the table judges ({reason})" if reason
                             else "not in the PMD table"))
    if not spec.has_power_figures or spec.tx_min_dbm is None:
        raise BudgetError(f"{option}: the PMD table names {spec.name} but holds no power "
                          "levels for it, so no budget can be worked out")
    return spec


def _number(option: str, value: float, *, minimum: float = 0.0) -> float:
    if not (math.isfinite(value) and value >= minimum):
        raise BudgetError(f"{option}: must be a number >= {minimum:g}, got {value!r}")
    return value


def _stock(text: str) -> tuple[float, ...]:
    try:
        steps = tuple(float(x) for x in text.split(",") if x.strip())
    except ValueError:
        raise BudgetError(f"--stock: {text!r} is not a list of dB values like 1,3,5") from None
    if not steps or any(not (math.isfinite(s) and s > 0) for s in steps):
        raise BudgetError(f"--stock: {text!r}: give pad values in dB above 0, like 1,3,5")
    return steps


def plan_from_args(args: argparse.Namespace, catalogue: Catalogue | None = None
                   ) -> BudgetPlan:
    catalogue = catalogue or default_catalogue()
    fibre = args.fibre
    for option in ("length_km", "fibre_db_per_km", "connector_db", "splice_db", "pad_a",
                   "pad_b", "margin_sensitivity", "margin_overload"):
        value = getattr(args, option)
        if value is not None:
            _number("--" + option.replace("_", "-"), value)
    for option in ("connectors", "splices"):
        if getattr(args, option) < 0:
            raise BudgetError(f"--{option}: must be 0 or more, got {getattr(args, option)}")
    a = _spec(catalogue, "--a", args.a, fibre)
    b = _spec(catalogue, "--b", args.b, fibre)
    base = DEFAULT_COEFFICIENTS
    per_km = args.fibre_db_per_km
    coefficients = PlanningCoefficients(
        sm_1310_db_per_km=per_km if per_km is not None else base.sm_1310_db_per_km,
        sm_1550_db_per_km=per_km if per_km is not None else base.sm_1550_db_per_km,
        mm_850_db_per_km=per_km if per_km is not None else base.mm_850_db_per_km,
        mm_1300_db_per_km=per_km if per_km is not None else base.mm_1300_db_per_km,
        connector_db=args.connector_db if args.connector_db is not None else base.connector_db,
        splice_db=args.splice_db if args.splice_db is not None else base.splice_db,
    )
    try:
        span = SpanPlan(args.length_km, fibre, args.connectors, args.splices,
                        args.pad_a or 0.0, args.pad_b or 0.0)
        targets = PadTargets(args.margin_sensitivity, args.margin_overload, args.hysteresis)
        return plan_link(a, b, span, coefficients=coefficients, targets=targets,
                         steps=_stock(args.stock))
    except ValueError as exc:
        raise BudgetError(str(exc)) from None


def render(plan: BudgetPlan) -> str:
    out = [f"engineered loss {plan.engineered_loss_db:.1f} dB; verdict {plan.verdict.value}"]
    for d in plan.directions:
        pad = f"{d.pad_db:g} dB pad at {d.to_end}'s receiver" if d.pad_db else "no pad"
        out.append(
            f"  {d.from_end} -> {d.to_end} ({d.tx_pmd} into {d.rx_pmd}, {d.wavelength_nm:.0f} nm):"
            f" loss {d.loss_db:.1f} dB, budget {d.power_budget_db:.1f} dB, Rx "
            f"{d.rx_min_dbm:+.1f}..{d.rx_max_dbm:+.1f} dBm; {d.verdict.value}, {pad}: "
            f"{d.reason}")
    out += [f"  note: {n}" for n in plan.notes]
    if any(d.pad_db for d in plan.directions):
        from lightwarden.rules.advice import LASER_CAUTION

        out += ["", LASER_CAUTION]
    return "\n".join(out)


def build_parser(p: argparse.ArgumentParser) -> argparse.ArgumentParser:
    c = DEFAULT_COEFFICIENTS
    p.add_argument("--a", required=True, metavar="PMD", help="PMD at end a, e.g. 10GBASE-LR")
    p.add_argument("--b", required=True, metavar="PMD", help="PMD at end b")
    p.add_argument("--length-km", required=True, type=float, metavar="KM", help="span length")
    p.add_argument("--fibre", default="OS2", metavar="TYPE",
                   help="OS1, OS2, OM1..OM5 (default OS2)")
    p.add_argument("--connectors", type=int, default=2, metavar="N",
                   help="mated connector pairs in the path, patch panels included (default 2)")
    p.add_argument("--splices", type=int, default=0, metavar="N", help="splices (default 0)")
    p.add_argument("--fibre-db-per-km", type=float, default=None, metavar="DB",
                   help=f"fibre loss; default by fibre and band: single-mode "
                        f"{c.sm_1310_db_per_km:g} dB/km at 1310 nm, {c.sm_1550_db_per_km:g} at "
                        f"1550, multimode {c.mm_850_db_per_km:g} at 850, {c.mm_1300_db_per_km:g} "
                        "at 1300 (standards.md planning values, practice; multimode 1300 nm "
                        "the TIA-568 cable maximum)")
    p.add_argument("--connector-db", type=float, default=None, metavar="DB",
                   help=f"per mated pair (default {c.connector_db:g}, planning value, practice)")
    p.add_argument("--splice-db", type=float, default=None, metavar="DB",
                   help=f"per splice (default {c.splice_db:g}, fusion splice, practice)")
    p.add_argument("--pad-a", type=float, default=None, metavar="DB",
                   help="a pad already fitted at a's receiver")
    p.add_argument("--pad-b", type=float, default=None, metavar="DB",
                   help="a pad already fitted at b's receiver")
    p.add_argument("--stock", default=",".join(f"{s:g}" for s in STOCKED_PADS_DB),
                   metavar="DB,DB,...", help="stocked fixed pads (default %(default)s)")
    p.add_argument("--margin-sensitivity", type=float, default=3.0, metavar="DB",
                   help="margin to keep above sensitivity (default 3, common practice)")
    p.add_argument("--margin-overload", type=float, default=1.0, metavar="DB",
                   help="margin to keep below overload (default 1, common practice)")
    p.add_argument("--hysteresis", type=float, default=0.5, metavar="DB",
                   help="power hysteresis kept on top of the overload margin (default 0.5)")
    p.add_argument("--json", action="store_true", help="print JSON")
    return p


def run(args: argparse.Namespace) -> int:
    try:
        plan = plan_from_args(args)
    except BudgetError as exc:
        print(f"lightwarden budget: {exc}", file=sys.stderr)
        return EXIT_USAGE
    print(json.dumps(plan.as_json(), indent=2) if args.json else render(plan))
    return EXIT_FAILS if plan.verdict.value == "fails" else EXIT_OK


# -- over HTTP: the same options as query parameters ----------------------------------

#: Query parameters the page and the API take: the command's options without "--".
_PARAMS = ("a", "b", "length-km", "fibre", "connectors", "splices", "fibre-db-per-km",
           "connector-db", "splice-db", "pad-a", "pad-b", "stock", "margin-sensitivity",
           "margin-overload", "hysteresis")


class _Refused(Exception):
    pass


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # type: ignore[override]
        raise _Refused(message)


def _query_plan(req: HttpRequest) -> BudgetPlan:
    argv: list[str] = []
    for key, values in req.query.items():
        name = key.replace("_", "-")
        if name not in _PARAMS:
            raise _Refused(f"unknown parameter {key!r} (known: {', '.join(_PARAMS)})")
        argv += [f"--{name}", values[-1]]
    args = build_parser(_Parser(prog="budget", add_help=False)).parse_args(argv)
    try:
        return plan_from_args(args)
    except BudgetError as exc:
        raise _Refused(str(exc).replace("--", "")) from None


def budget_api(req: HttpRequest) -> Response:
    try:
        plan = _query_plan(req)
    except _Refused as exc:
        return 400, "application/json", json.dumps({"error": str(exc)}).encode()
    return 200, "application/json", json.dumps(plan.as_json()).encode()


_FORM = (("a", "PMD at a", "10GBASE-LR"), ("b", "PMD at b", "10GBASE-LR"),
         ("length-km", "length km", "10"), ("fibre", "fibre", "OS2"),
         ("connectors", "connector pairs", "2"), ("splices", "splices", "0"),
         ("pad-a", "pad at a dB", "0"), ("pad-b", "pad at b dB", "0"))


def budget_page(req: HttpRequest) -> Response:
    """A small form and its answer; the query string is the whole state (shareable)."""
    from lightwarden.rules.advice import LASER_CAUTION

    given = {k.replace("_", "-"): v[-1] for k, v in req.query.items()}
    fields = "".join(
        f"<label>{escape(label)} <input name={name} value=\"{escape(given.get(name, dflt))}\">"
        "</label> " for name, label, dflt in _FORM)
    out = ["<!doctype html><html><head><meta charset=utf-8><title>power budget</title>"
           "<style>body{font-family:sans-serif;margin:1em}label{margin-right:1em}"
           "td,th{padding:2px 8px;text-align:right}.l{text-align:left}</style></head><body>"
           "<h1>Will the link close?</h1>",
           f"<form method=get action=/budget>{fields}<button>plan</button></form>"]
    status = 200
    if "a" in given:
        try:
            plan = _query_plan(req)
        except _Refused as exc:
            status = 400
            out.append(f"<p><b>{escape(str(exc))}</b></p>")
        else:
            out.append(f"<p>engineered loss {plan.engineered_loss_db:.1f} dB; verdict "
                       f"<b>{plan.verdict.value}</b> (<a href=\"/api/budget?"
                       f"{escape(urlencode(given))}\">JSON</a>)</p>")
            out.append("<table><tr><th class=l>direction</th><th>loss dB</th>"
                       "<th>budget dB</th><th>Rx dBm</th><th>pad dB</th>"
                       "<th class=l>verdict</th><th class=l>why</th></tr>")
            for d in plan.directions:
                out.append(
                    f"<tr><td class=l>{d.from_end} &rarr; {d.to_end}</td>"
                    f"<td>{d.loss_db:.1f}</td><td>{d.power_budget_db:.1f}</td>"
                    f"<td>{d.rx_min_dbm:+.1f}..{d.rx_max_dbm:+.1f}</td>"
                    f"<td>{'' if d.pad_db is None else f'{d.pad_db:g}'}</td>"
                    f"<td class=l>{d.verdict.value}</td><td class=l>{escape(d.reason)}</td></tr>")
            out.append("</table>")
            out += [f"<p>note: {escape(n)}</p>" for n in plan.notes]
            if any(d.pad_db for d in plan.directions):
                out.append(f"<p>{escape(LASER_CAUTION)}</p>")
    out.append("</body></html>")
    return status, "text/html; charset=utf-8", "".join(out).encode()


def mount(server: HttpServer) -> None:
    server.add_route("/budget", budget_page)
    server.add_route("/api/budget", budget_api)
