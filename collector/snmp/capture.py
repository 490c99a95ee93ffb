"""Saved walks as a device: ``snmpwalk -On`` / ``snmpbulkwalk -On`` output, read offline.

An operator who cannot give the monitor access to a switch can send a capture instead;
:class:`CaptureSession` answers the source's GETs and column walks from it, so the same
inventory, sensor decoding and judgement run as on a live poll.

The capture format is net-snmp's numeric output: one ``.OID = TYPE: value`` per line,
``INTEGER: ok(1)`` enum labels, ``STRING: "text"``, ``Hex-STRING: 00 1A ...`` wrapped over
several lines, ``Timeticks: (12345) 0:02:03.45``, ``OID: .1.3...``, ``No Such Object``
lines; several walks may be concatenated in one file (a later value wins).
"""

from __future__ import annotations

import re
from bisect import bisect_right
from collections.abc import Sequence
from pathlib import Path

from lightwarden.collector.snmp.session import Oid, parse_oid

_LINE = re.compile(r"^\.?(\d+(?:\.\d+)+)\s+=\s+(.*)$")
_TYPED = re.compile(r"^([A-Za-z][A-Za-z0-9-]*):\s?(.*)$")
_ENUM = re.compile(r"^[A-Za-z][\w-]*\((-?\d+)\)$")
_HEX = re.compile(r"^(?:[0-9A-Fa-f]{2}\s*)+$")
_ABSENT = ("No Such Object", "No Such Instance")
#: The end of a walk: net-snmp prints it against the last OID it asked after, which is a
#: real row already read, so it carries no value of its own.
_END_OF_WALK = "No more variables"


class CaptureError(ValueError):
    """A capture that cannot be read; the message names the file and line."""


def _value(kind: str, text: str, where: str) -> object:
    text = text.strip()
    if kind in ("INTEGER", "Gauge32", "Counter32", "Counter64", "Unsigned32", "UInteger32"):
        enum = _ENUM.match(text)
        number = enum.group(1) if enum else text.split()[0] if text else ""
        try:
            return int(number)
        except ValueError:
            raise CaptureError(f"{where}: {kind} value {text!r} is not a number") from None
    if kind == "Timeticks":
        m = re.match(r"^\((\d+)\)", text)
        if not m:
            raise CaptureError(f"{where}: Timeticks value {text!r} has no (ticks)")
        return int(m.group(1))
    if kind == "STRING":
        if len(text) >= 2 and text[0] == text[-1] == '"':
            text = text[1:-1]
        return text.encode("utf-8")
    if kind == "Hex-STRING":
        return bytes.fromhex(text.replace(" ", "").replace("\n", ""))
    if kind == "OID":
        return text.lstrip(".")
    if kind in ("IpAddress", "Network Address", "BITS", "Opaque"):
        return text
    raise CaptureError(f"{where}: unknown value type {kind!r}")


def _open_quote(value: str) -> bool:
    """A quoted STRING value whose closing quote is still to come (it spans lines)."""
    v = value.strip()
    return v.startswith('"') and (len(v) == 1 or not v.endswith('"') or v.endswith('\\"'))


def parse_capture(text: str, origin: str = "capture") -> dict[Oid, object]:
    """OID -> value (int, bytes for strings, str for OIDs; None where absent)."""
    out: dict[Oid, object] = {}
    pending: tuple[Oid, str, str, int] | None = None  # a Hex-STRING still being read

    def flush() -> None:
        nonlocal pending
        if pending is not None:
            oid, kind, value, lineno = pending
            out[oid] = _value(kind, value, f"{origin}: line {lineno}")
            pending = None

    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.rstrip()
        if not line.strip():
            continue
        m = _LINE.match(line)
        if m is None:
            if pending is not None and _HEX.match(line.strip()):
                oid, kind, value, start = pending
                pending = (oid, kind, f"{value} {line.strip()}", start)
                continue
            if pending is not None and pending[1] == "STRING" and _open_quote(pending[2]):
                oid, kind, value, start = pending  # a quoted string that spans lines
                pending = (oid, kind, f"{value}\n{line}", start)
                continue
            raise CaptureError(
                f"{origin}: line {lineno}: not a numeric walk line (.OID = TYPE: value); "
                "make captures with snmpwalk -On or snmpbulkwalk -On")
        flush()
        oid = parse_oid(m.group(1))
        rest = m.group(2).strip()
        if rest.startswith(_END_OF_WALK):
            continue
        if any(rest.startswith(a) for a in _ABSENT):
            out[oid] = None
            continue
        if rest == '""':
            out[oid] = b""
            continue
        typed = _TYPED.match(rest)
        if typed is None:
            raise CaptureError(f"{origin}: line {lineno}: value {rest!r} has no type")
        kind, value = typed.group(1), typed.group(2)
        if kind in ("Hex-STRING", "STRING"):
            pending = (oid, kind, value, lineno)
        else:
            out[oid] = _value(kind, value, f"{origin}: line {lineno}")
    flush()
    if not out:
        raise CaptureError(f"{origin}: no walk lines found")
    return out


def load_capture(path: str | Path) -> dict[Oid, object]:
    p = Path(path)
    try:
        text = p.read_text("utf-8", errors="replace")
    except OSError as exc:
        raise CaptureError(f"{p}: cannot read the capture ({exc.strerror})") from None
    return parse_capture(text, str(p))


class CaptureSession:
    """Answers a source's ``get`` and ``walk_columns`` from a capture (no network)."""

    def __init__(self, values: dict[Oid, object], origin: str = "capture") -> None:
        self._values = values
        self._sorted = sorted(values)
        self.origin = origin
        self.varbinds = 0

    @property
    def where(self) -> str:
        return self.origin

    @staticmethod
    def _plain(value: object, octets: bool) -> object:
        if isinstance(value, bytes) and not octets:
            return value.decode("utf-8", "replace")
        return value

    async def get(self, oids: Sequence[str], what: str, *, octets: bool = False
                  ) -> dict[str, object]:
        self.varbinds += len(oids)
        return {oid: self._plain(self._values.get(parse_oid(oid)), octets) for oid in oids}

    async def walk_columns(self, columns: Sequence[str], what: str, *, octets: bool = False
                           ) -> dict[str, dict[Oid, object]]:
        out: dict[str, dict[Oid, object]] = {}
        for col in columns:
            prefix = parse_oid(col)
            rows: dict[Oid, object] = {}
            i = bisect_right(self._sorted, prefix)
            while i < len(self._sorted) and self._sorted[i][: len(prefix)] == prefix:
                oid = self._sorted[i]
                rows[oid[len(prefix):]] = self._plain(self._values[oid], octets)
                i += 1
            out[col] = rows
            self.varbinds += len(rows)
        return out
