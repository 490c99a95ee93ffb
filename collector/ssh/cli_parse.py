"""Turn CLI command output into a ReadingBatch, following a platform definition.

Pure: text in, batch and a list of problems out. Each TextFSM template is compiled once
and reused. Templates end with a catch-all rule that records any line nothing else
matched; such lines are reported (and, when they name a port and lane, become INVALID
rows), never silently dropped. Cells like ``--``, ``N/A``, ``-inf`` or blanks become
NO_LIGHT or UNSUPPORTED rows with a note, per the definition's word lists.
"""

from __future__ import annotations

import math
import re
import threading
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import textfsm

from lightwarden.collector.readings import (
    MAX_LANE,
    MODULE_QUANTITIES,
    BatchBuilder,
    OpticIdentity,
    Quantity,
    ReadingBatch,
    ReadingStatus,
    Thresholds,
    is_ascii_number,
)
from lightwarden.collector.ssh.platforms.platform import (
    QUANTITY_KEYS,
    UNITS_FOR,
    Platform,
    ReadingsTable,
    ThresholdsTable,
)
from lightwarden.collector.units import mw_to_dbm

POWER = (Quantity.RX_POWER, Quantity.TX_POWER)

# -- templates -------------------------------------------------------------------------


class _Compiled:
    """A compiled template. TextFSM objects carry parse state, so parses are serialised."""

    __slots__ = ("fsm", "lock", "mtime")

    def __init__(self, path: Path) -> None:
        self.mtime = path.stat().st_mtime_ns
        with path.open(encoding="utf-8") as fh:
            self.fsm = textfsm.TextFSM(fh)
        self.lock = threading.Lock()


_cache: dict[Path, _Compiled] = {}
_cache_lock = threading.Lock()


def compiled_template(path: Path) -> _Compiled:
    """The compiled template for ``path``, compiled on first use (again if the file changed)."""
    path = path.resolve()
    with _cache_lock:
        entry = _cache.get(path)
        if entry is None or entry.mtime != path.stat().st_mtime_ns:
            entry = _cache[path] = _Compiled(path)
        return entry


@dataclass(slots=True)
class Table:
    """Rows a template matched, plus the lines it could not place (with 1-based line numbers)."""

    rows: list[dict[str, str]]
    unmatched: list[tuple[int, str]]


def run_template(path: Path, text: str, unmatched_value: str) -> Table:
    entry = compiled_template(path)
    with entry.lock:
        entry.fsm.Reset()
        header = list(entry.fsm.header)
        raw = entry.fsm.ParseText(text)
    lines = text.splitlines()
    rows: list[dict[str, str]] = []
    unmatched: list[tuple[int, str]] = []
    cursor = 0  # unmatched lines come back in order: search forward for their numbers
    for rec in raw:
        row = {k: ("" if v is None else str(v)) for k, v in zip(header, rec, strict=True)}
        bad = row.get(unmatched_value, "")
        if bad:
            lineno = cursor
            for i in range(cursor, len(lines)):
                if lines[i].strip() == bad.strip():
                    lineno = i
                    break
            cursor = lineno + 1
            unmatched.append((lineno + 1, bad.strip()))
            continue
        rows.append(row)
    return Table(rows, unmatched)


# -- cells -----------------------------------------------------------------------------


@dataclass(slots=True, frozen=True)
class Cell:
    value: float | None  # in reading units (dBm, mA, C, V) when status is OK
    status: ReadingStatus
    note: str = ""


def read_cell(text: str, quantity: Quantity, unit: str, platform: Platform) -> Cell:
    """Interpret one table cell shown in ``unit`` as a reading of ``quantity``."""
    shown = text.strip()
    word = shown.lower()
    power = quantity in POWER
    if not shown:
        return Cell(None, ReadingStatus.UNSUPPORTED, f"{quantity.label}: blank cell, not reported")
    if power and word in {w.lower() for w in platform.no_light}:
        return Cell(None, ReadingStatus.NO_LIGHT, f"no light (device shows {shown!r})")
    if word in {w.lower() for w in platform.not_supported}:
        note = f"{quantity.label}: not supported (device shows {shown!r})"
        return Cell(None, ReadingStatus.UNSUPPORTED, note)
    if word in {w.lower() for w in platform.unavailable}:
        note = f"{quantity.label}: sensor not reporting (device shows {shown!r})"
        return Cell(None, ReadingStatus.UNAVAILABLE, note)
    if word in {w.lower() for w in platform.no_light}:
        return Cell(None, ReadingStatus.UNSUPPORTED, f"{quantity.label}: no reading ({shown!r})")
    if unit not in UNITS_FOR[quantity]:
        return Cell(None, ReadingStatus.INVALID, f"{quantity.label}: unknown unit {unit!r}")
    try:
        # float() also reads other scripts' digits; a device prints ASCII.
        number = float(shown) if shown.isascii() else math.nan
    except ValueError:
        number = math.nan
    if math.isnan(number) and shown.lower() not in ("nan", "+nan", "-nan"):
        return Cell(None, ReadingStatus.INVALID, f"{quantity.label}: unreadable value {shown!r}")
    if math.isnan(number):
        return Cell(None, ReadingStatus.INVALID, f"{quantity.label}: value is not a number")
    if unit == "dBm":
        if number == -math.inf:
            return Cell(None, ReadingStatus.NO_LIGHT, f"no light (device shows {shown!r})")
        if not math.isfinite(number):
            return Cell(None, ReadingStatus.INVALID, f"{quantity.label}: {shown!r} is not finite")
        if platform.no_light_dbm is not None and number <= platform.no_light_dbm:
            return Cell(None, ReadingStatus.NO_LIGHT, f"no light ({shown} dBm is the floor)")
        return Cell(number, ReadingStatus.OK)
    if not math.isfinite(number):
        return Cell(None, ReadingStatus.INVALID, f"{quantity.label}: {shown!r} is not finite")
    if unit in ("mW", "uW"):
        milliwatts = number / 1000.0 if unit == "uW" else number
        if milliwatts < 0:
            return Cell(None, ReadingStatus.INVALID, f"{quantity.label}: negative power {shown!r}")
        if milliwatts == 0:
            return Cell(None, ReadingStatus.NO_LIGHT, f"no light (0 {unit})")
        return Cell(mw_to_dbm(milliwatts), ReadingStatus.OK)
    if unit == "uA":
        return Cell(number / 1000.0, ReadingStatus.OK)
    return Cell(number, ReadingStatus.OK)


# -- whole poll ------------------------------------------------------------------------


@dataclass(slots=True)
class ParseResult:
    batch: ReadingBatch
    problems: list[str] = field(default_factory=list)  # each names the command and line


@dataclass(slots=True)
class _PortRows:
    rows: list[tuple[int, dict[str, str], ReadingsTable]] = field(default_factory=list)
    broken: list[tuple[int, str, ReadingsTable]] = field(default_factory=list)


def _inventory(
    platform: Platform, text: str | None, problems: list[str]
) -> dict[str, dict[str, str]]:
    inv = platform.inventory
    if inv is None or text is None:
        return {}
    table = run_template(platform.template_path(inv.template), text, inv.unmatched)
    for lineno, line in table.unmatched:
        problems.append(_unmatched_problem(platform, inv.command, lineno, line))
    blanks = {w.lower() for w in (*platform.no_light, *platform.not_supported,
                                  *platform.unavailable)}
    out: dict[str, dict[str, str]] = {}
    for row in table.rows:
        port = row.get(inv.columns.port, "")
        if not port:
            continue
        fields: dict[str, str] = {}
        for key, value_name in inv.columns:
            if key == "port" or value_name is None:
                continue
            cell = row.get(value_name, "").strip()
            fields[key] = "" if cell.lower() in blanks else cell
        out[port] = fields
    return out


def _thresholds(
    platform: Platform, table_def: ThresholdsTable, text: str, problems: list[str]
) -> dict[str, dict[Quantity, Thresholds]]:
    table = run_template(platform.template_path(table_def.template), text, table_def.unmatched)
    for lineno, line in table.unmatched:
        problems.append(_unmatched_problem(platform, table_def.command, lineno, line))
    cols = table_def.columns
    out: dict[str, dict[Quantity, Thresholds]] = {}
    for row in table.rows:
        port = row.get(cols.port, "")
        if not port:
            continue
        word = row.get(cols.quantity, "")
        key = table_def.quantity_words.get(word)
        if key is None:
            problems.append(f"{table_def.command!r}: {port} unknown quantity {word!r}")
            continue
        q = QUANTITY_KEYS[key]
        unit = row.get(cols.unit_value, "") if cols.unit_value else table_def.units[key]
        edges: dict[str, float | None] = {}
        for edge in ("high_alarm", "low_alarm", "high_warning", "low_warning"):
            name = getattr(cols, edge)
            if name is None:
                edges[edge] = None
                continue
            cell = read_cell(row.get(name, ""), q, unit, platform)
            if cell.status is ReadingStatus.INVALID:
                problems.append(f"{table_def.command!r}: {port} {word} {edge}: {cell.note}")
            edges[edge] = cell.value if cell.status is ReadingStatus.OK else None
        out.setdefault(port, {})[q] = Thresholds(**edges)
    return out


def _unmatched_problem(platform: Platform, command: str, lineno: int, line: str) -> str:
    if platform.is_error_line(line):
        return f"{command!r} refused by the device (line {lineno}): {line!r}"
    return f"{command!r} line {lineno} not understood: {line!r}"


#: Cells are split on whitespace and on column bars, so "sfp7 | 1 | 0.4" names sfp7 lane 1.
_CELL_SPLIT = re.compile(r"[\s|]+")


def _first_token_port_lane(line: str, has_lane: bool) -> tuple[str, int] | None:
    tokens = [t for t in _CELL_SPLIT.split(line) if t]
    if not tokens:
        return None
    if not has_lane:
        return tokens[0], 1
    if len(tokens) >= 2 and is_ascii_number(tokens[1]) and 1 <= int(tokens[1]) <= MAX_LANE:
        return tokens[0], int(tokens[1])
    return None


def parse_outputs(
    device: str, platform: Platform, outputs: Mapping[str, str], taken_at: float
) -> ParseResult:
    """Build one device's batch from each command's output (command text -> output).

    A missing command output is reported as a problem; the rest is still parsed.
    """
    problems: list[str] = []
    inventory = _inventory(
        platform, outputs.get(platform.inventory.command) if platform.inventory else None,
        problems,
    )
    if platform.inventory and platform.inventory.command not in outputs:
        problems.append(f"no output for {platform.inventory.command!r}")
    thresholds: dict[str, dict[Quantity, Thresholds]] = {}
    for thdef in platform.thresholds_tables():
        text = outputs.get(thdef.command)
        if text is None:
            problems.append(f"no output for {thdef.command!r}")
            continue
        for port, per_q in _thresholds(platform, thdef, text, problems).items():
            thresholds.setdefault(port, {}).update(per_q)

    ports: dict[str, _PortRows] = {}
    for tdef in platform.readings_tables():
        text = outputs.get(tdef.command)
        if text is None:
            problems.append(f"no output for {tdef.command!r}")
            continue
        table = run_template(platform.template_path(tdef.template), text, tdef.unmatched)
        cols = tdef.columns
        for row in table.rows:
            port = row.get(cols.port, "")
            if not port:
                continue  # a record holding only carried-down header values
            lane_text = row.get(cols.lane, "1") if cols.lane else "1"
            if not is_ascii_number(lane_text) or not 1 <= int(lane_text) <= MAX_LANE:
                problems.append(f"{tdef.command!r}: {port} has a bad lane number {lane_text!r}"
                                f" (1..{MAX_LANE})")
                continue
            ports.setdefault(port, _PortRows()).rows.append((int(lane_text), row, tdef))
        for lineno, line in table.unmatched:
            problems.append(_unmatched_problem(platform, tdef.command, lineno, line))
            where = _first_token_port_lane(line, cols.lane is not None)
            if where is not None and (where[0] in ports or where[0] in inventory):
                ports.setdefault(where[0], _PortRows()).broken.append((where[1], line, tdef))

    builder = BatchBuilder(device)
    for port, prs in ports.items():
        inv = inventory.get(port, {})
        lanes = max([lane for lane, _, _ in prs.rows] + [lane for lane, _, _ in prs.broken])
        wavelength = _float_or_none(inv.get("wavelength_nm", ""))
        optic = builder.add_optic(
            OpticIdentity(
                device=device,
                port=port,
                form_factor=inv.get("form_factor", ""),
                pmd=inv.get("pmd", ""),
                pmd_source="inventory" if inv.get("pmd") else "",
                wavelength_nm=wavelength,
                lanes=lanes,
                part_number=inv.get("part_number", ""),
                serial=inv.get("serial", ""),
                thresholds=dict(thresholds.get(port, {})),
            )
        )
        module_done: set[Quantity] = set()
        # Module-wide quantities come from the port's lowest-numbered row.
        for lane, row, tdef in sorted(prs.rows, key=lambda r: r[0]):
            for q, col in tdef.columns.quantities():
                if q in MODULE_QUANTITIES and q in module_done:
                    continue
                unit = row.get(col.unit_value, "") if col.unit_value else col.unit
                cell = read_cell(row.get(col.value, ""), q, unit or "", platform)
                if cell.status is ReadingStatus.INVALID:
                    problems.append(f"{tdef.command!r}: {port} lane {lane}: {cell.note}")
                if q in MODULE_QUANTITIES:
                    module_done.add(q)
                    builder.add(optic, 0, q, cell.value, cell.status, cell.note)
                else:
                    builder.add(optic, lane, q, cell.value, cell.status, cell.note)
        for lane, line, tdef in prs.broken:
            note = f"line not understood: {line!r}"
            for q, _col in tdef.columns.quantities():
                if q in MODULE_QUANTITIES:
                    if q in module_done:
                        continue
                    module_done.add(q)
                    builder.add(optic, 0, q, None, ReadingStatus.INVALID, note)
                else:
                    builder.add(optic, lane, q, None, ReadingStatus.INVALID, note)
    return ParseResult(builder.build(taken_at), problems)


def _float_or_none(text: str) -> float | None:
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) and value > 0 else None


def split_transcript(platform: Platform, text: str) -> dict[str, str]:
    """Split a captured terminal session (prompt, command, output, prompt, ...) by command.

    Lets someone check a definition against output copied from a real session: each line
    that starts with a prompt followed by a command opens that command's output.
    """
    prompt = platform.prompt.removesuffix(r"\Z").removesuffix("$")
    head = re.compile(rf"^(?:{prompt})(?P<cmd>.*\S.*)$")
    bare = re.compile(rf"^(?:{prompt})\s*$")
    outputs: dict[str, str] = {}
    current: str | None = None
    buf: list[str] = []
    for line in text.splitlines():
        m = head.match(line)
        if m or bare.match(line):
            if current is not None:
                outputs[current] = "\n".join(buf)
            current = m.group("cmd").strip() if m else None
            buf = []
        elif current is not None:
            buf.append(line)
    if current is not None:
        outputs[current] = "\n".join(buf)
    return outputs
