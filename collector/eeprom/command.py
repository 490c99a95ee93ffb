"""``lightwarden decode FILE [--json]``: the function behind the command.

Exit codes: 0 decoded without problems, 1 decoded with problems (a bad check byte, a
field out of range), 2 unusable input (missing, empty, not hex, or no known layout).
Never raises for bad input.
"""

from __future__ import annotations

import json
from pathlib import Path

from lightwarden.collector.readings import Quantity

from . import decode, to_json
from .mapfile import MapFileError, load
from .result import EDGES, ModuleMap

EXIT_CLEAN, EXIT_PROBLEMS, EXIT_UNREADABLE = 0, 1, 2


def decode_command(path: str | Path, as_json: bool = False) -> tuple[int, str]:
    """Decode the map in ``path``; returns (exit code, text to print)."""
    try:
        data = load(path)
    except MapFileError as exc:
        return EXIT_UNREADABLE, f"cannot decode {exc}"
    m = decode(data)
    # Bytes that are no known layout are unusable input, not a map with problems.
    code = EXIT_UNREADABLE if not m.spec else EXIT_PROBLEMS if m.problems else EXIT_CLEAN
    if as_json:
        doc = {"file": str(path), **to_json(m)}
        return code, json.dumps(doc, indent=2)
    return code, render(m, str(path))


def _num(value: float | None, fmt: str, none: str = "-") -> str:
    return none if value is None else format(value, fmt)


def render(m: ModuleMap, source: str = "") -> str:
    """Human-readable summary: identity, per-lane monitors, thresholds, flags, checks."""
    out: list[str] = []
    if source:
        out.append(f"file          {source}")
    ident = "-" if m.identifier is None else f"0x{m.identifier:02X} {m.identifier_name}"
    out.append(f"identifier    {ident}")
    out.append(f"layout        {m.spec or '-'}   form factor {m.form_factor or '-'}")
    out.append(
        f"PMD           {m.pmd or 'unknown'}   wavelength "
        f"{_num(m.wavelength_nm, '.1f')} nm   nominal rate {_num(m.nominal_rate_mbd, 'd')} MBd"
    )
    if m.link_lengths_m:
        reach = ", ".join(f"{k} {v} m" for k, v in m.link_lengths_m.items())
        out.append(f"reach         {reach}")
    out.append(
        f"vendor        {m.vendor_name or '-'}   part {m.part_number or '-'}   "
        f"serial {m.serial or '-'}   rev {m.vendor_rev or '-'}"
    )
    state = f"   module state {m.module_state}" if m.module_state else ""
    out.append(
        f"diagnostics   {'yes' if m.diagnostics else 'no'}   calibration "
        f"{m.calibration or '-'}   Rx power {m.rx_power_type or '-'}{state}"
    )
    out.append(
        f"module        temperature {_num(m.temperature_c, '.2f')} C   "
        f"supply {_num(m.supply_v, '.4f')} V"
    )
    if m.lanes:
        out.append("")
        out.append(f"{'lane':>4}  {'Rx dBm':>9}  {'Tx dBm':>9}  {'bias mA':>8}")
        for lane in m.lanes:
            rx = "no light" if lane.rx_no_light else _num(lane.rx_power_dbm, ".2f")
            tx = "no light" if lane.tx_no_light else _num(lane.tx_power_dbm, ".2f")
            out.append(f"{lane.lane:>4}  {rx:>9}  {tx:>9}  {_num(lane.bias_ma, '.3f'):>8}")
    if m.thresholds:
        out.append("")
        heads = [e.replace("_", " ") for e in EDGES]
        out.append(f"{'threshold':<16}" + "".join(f"{h:>14}" for h in heads))
        for q in Quantity:
            t = m.thresholds.get(q)
            if t is None:
                continue
            fmt = ".2f" if q in (Quantity.RX_POWER, Quantity.TX_POWER) else ".3f"
            cells = "".join(f"{_num(getattr(t, e), fmt):>14}" for e in EDGES)
            out.append(f"{q.label + ' ' + q.unit:<16}{cells}")
    out.append("")
    if m.flags:
        shown = [f.name + (f" (lane {f.lane})" if f.lane else "") for f in m.flags]
        out.append("flags         " + ", ".join(shown))
    else:
        out.append("flags         none set")
    if m.checksums:
        parts = []
        for name, c in m.checksums.items():
            parts.append(
                f"{name} ok" if c.ok
                else f"{name} BAD (expected 0x{c.expected:02X}, found 0x{c.found:02X})"
            )
        out.append("check bytes   " + ", ".join(parts))
    if m.problems:
        out.append("problems:")
        out.extend(f"  - {p}" for p in m.problems)
    else:
        out.append("problems      none")
    return "\n".join(out)
