"""The `check` command's table: the same rows as the status page, for a terminal."""

from __future__ import annotations

from collections.abc import Sequence

from lightwarden.exporters.pages.rows import OpticRow
from lightwarden.rules.advice import LASER_CAUTION
from lightwarden.rules.consistency import Finding


def _fmt(v: float | None, width: int, prec: int = 2) -> str:
    return f"{'-':>{width}}" if v is None else f"{v:>{width}.{prec}f}"


def _grouped_notes(rows: list[OpticRow], shown: int = 4) -> list[str]:
    """Every note once, with where it applies: healthy rows' notes (OMA, a bad check byte,
    a module looser than the standard) matter too, and one note often covers many lanes."""
    where: dict[str, list[str]] = {}
    for r in rows:
        for note in r.notes:
            if note in r.value_notes:
                continue  # already beside the row
            places = where.setdefault(note, [])
            place = f"{r.device} {r.port}" + (f" lane {r.lane}" if r.lane > 1 else "")
            if place not in places:
                places.append(place)
    out = []
    for note, places in where.items():
        more = f" and {len(places) - shown} more" if len(places) > shown else ""
        out.append(f"  {note} ({', '.join(places[:shown])}{more})")
    return out


def render_check_table(rows: list[OpticRow], failures: list[dict[str, object]],
                       links: Sequence[Finding] = ()) -> str:
    """One line per optic lane, then failed devices, then the consistency findings, then
    what to do and the caution."""
    head = (f"{'DEVICE':<12} {'PORT':<7} {'L':>1} {'PMD':<13} {'RX dBm':>7} {'TX dBm':>7} "
            f"{'BIAS mA':>7} {'TEMP C':>6} {'VCC V':>5} {'OVLD':>6} {'SENS':>6} "
            f"{'M-OVLD':>6} {'M-SENS':>6} {'SOURCE':<9} CONDITION")
    out = [head]
    for r in rows:
        out.append(
            f"{r.device:<12.12} {r.port:<7.7} {r.lane:>1} {r.pmd or '?':<13.13} "
            f"{_fmt(r.rx_power_dbm, 7)} {_fmt(r.tx_power_dbm, 7)} {_fmt(r.bias_ma, 7, 1)} "
            f"{_fmt(r.temperature_c, 6, 1)} {_fmt(r.supply_v, 5, 2)} "
            f"{_fmt(r.rx_overload_dbm, 6, 1)} {_fmt(r.rx_sensitivity_dbm, 6, 1)} "
            f"{_fmt(r.margin_to_overload_db, 6, 1)} {_fmt(r.margin_to_sensitivity_db, 6, 1)} "
            f"{r.window_source:<9} {r.condition}"
            + (f"  ({'; '.join(r.value_notes)})" if r.value_notes else "")
        )
    for f in failures:
        out.append(f"{f['device']:<12} poll failed ({f['error_kind']}): {f['error']}")
    if links:
        out += ["", "Optics and plant that do not belong together:"]
        for lf in links:
            out += [f"  {lf.severity.word:<8} {lf.kind.value}: {lf.text}",
                    f"           {lf.advice}"]
    notes = _grouped_notes(rows)
    if notes:
        out += ["", "Notes:"]
        out += notes
    advised = [r for r in rows if r.advice]
    caution = next((r.caution for r in advised if r.caution), "")
    if links and not caution:
        caution = LASER_CAUTION  # the findings' advice means fitting or swapping optics
    if advised:
        out += ["", "What to do:"]
        out += [f"  {r.device} {r.port} lane {r.lane} ({r.condition}): {r.advice}"
                for r in advised]
    if caution:
        out += ["", caution]
    return "\n".join(out)
