"""Field readers shared by the SFF-8472, SFF-8636 and CMIS decoders.

Each reader takes the whole buffer and an absolute offset; callers check first that
the page holding the field is present, so readers never see short data.
"""

from __future__ import annotations

import math
import struct

from lightwarden.collector import units
from lightwarden.collector.readings import Quantity, Thresholds

from .result import EDGES, Checksum, Flag, ModuleMap

_PRINTABLE = bytes(range(0x20, 0x7F))
#: Bytes outside printable ASCII become '?' in one C-level pass.
_ASCII_TABLE = bytes(b if 0x20 <= b < 0x7F else ord("?") for b in range(256))

_S4 = struct.Struct(">4h")
_U4 = struct.Struct(">4H")


def ascii_field(data: bytes, start: int, length: int, what: str, problems: list[str]) -> str:
    """A space-padded ASCII field; non-printable bytes become '?' and are reported."""
    raw = data[start : start + length].rstrip(b" \x00")
    text = raw.translate(_ASCII_TABLE).decode("ascii")
    if raw.translate(None, _PRINTABLE):
        problems.append(f"{what} holds non-printable bytes")
    return text.strip()


def check(m: ModuleMap, name: str, data: bytes, start: int, end: int, at: int) -> None:
    """Record the check byte at ``at`` covering data[start:end]."""
    expected = units.checksum(data, start, end)
    found = data[at]
    m.checksums[name] = Checksum(expected == found, expected, found)
    if expected != found:
        m.problems.append(f"bad checksum {name}: expected 0x{expected:02X} found 0x{found:02X}")


def _edges(values: tuple[float | None, ...]) -> Thresholds:
    return Thresholds(
        high_alarm=values[0], low_alarm=values[1], high_warning=values[2], low_warning=values[3]
    )


def thresholds_block(
    data: bytes, at: int, quantity: Quantity, bias_multiplier: int = 1
) -> Thresholds | None:
    """Four big-endian thresholds (HA, LA, HW, LW); None when all four are zero.

    A block of zeros means the module declares nothing: 0 C or 0 V are not real limits.
    Optical power thresholds of zero have no dBm value and become None.
    """
    if quantity is Quantity.TEMPERATURE:
        raw = _S4.unpack_from(data, at)
        if not any(raw):
            return None
        return _edges(tuple(r * units.TEMP_LSB_C for r in raw))
    raw = _U4.unpack_from(data, at)
    if not any(raw):
        return None
    if quantity is Quantity.SUPPLY:
        return _edges(tuple(r * units.VCC_LSB_V for r in raw))
    if quantity is Quantity.BIAS:
        step = units.BIAS_LSB_MA * bias_multiplier
        return _edges(tuple(r * step for r in raw))
    return _edges(tuple(units.power_dbm(r) for r in raw))


def edge_flags(m: ModuleMap, byte: int, label: str, lane: int, first_bit: int) -> None:
    """Four flag bits (HA, LA, HW, LW) at first_bit, first_bit-1, ... set -> Flag."""
    for i, edge in enumerate(EDGES):
        if byte >> (first_bit - i) & 1:
            m.flags.append(Flag(f"{label}_{edge}", lane))


def finite(value: float) -> float | None:
    return value if math.isfinite(value) else None
