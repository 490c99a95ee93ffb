"""Module memory-map decoders: SFF-8472, SFF-8636 and CMIS, as pure functions over bytes.

Public API:

- ``decode(data) -> ModuleMap``: never raises; anything wrong is named in ``problems``.
- ``parse_hexdump(text) -> bytes``: our hex dump text format (README.md); raises
  ``HexDumpError``.
- ``load(path) -> bytes``: a raw binary or hex dump file; raises ``MapFileError``.
- ``to_json(ModuleMap) -> dict``: the JSON shape of ``lightwarden decode --json``.
"""

from __future__ import annotations

from typing import Any

from lightwarden.collector.readings import Quantity

from . import cmis, codes, sff8472, sff8636
from .hexdump import HexDumpError, format_hexdump, parse_hexdump
from .mapfile import MapFileError, load
from .result import EDGES, Checksum, Flag, LaneMonitor, ModuleMap

__all__ = [
    "Checksum",
    "Flag",
    "HexDumpError",
    "LaneMonitor",
    "MapFileError",
    "ModuleMap",
    "decode",
    "format_hexdump",
    "load",
    "parse_hexdump",
    "to_json",
]


def decode(data: bytes | bytearray | memoryview) -> ModuleMap:
    """Decode a memory map in our binary layout; the layout follows from byte 0."""
    m = ModuleMap()
    try:
        _dispatch(bytes(data), m)
    except Exception as exc:  # last line of defence: the fuzz tests assert it never fires
        m.problems.append(f"internal decoder error: {type(exc).__name__}: {exc}")
    if len(m.problems) > 1:
        m.problems = list(dict.fromkeys(m.problems))
    return m


def _dispatch(data: bytes, m: ModuleMap) -> None:
    if not data:
        m.problems.append("empty input: no bytes")
        return
    code = data[0]
    m.identifier = code
    m.identifier_name = codes.identifier_name(code)
    if code in codes.SFF8472_IDS:
        sff8472.decode(data, m)
    elif code in codes.SFF8636_IDS:
        sff8636.decode(data, m)
    elif code in codes.CMIS_IDS:
        cmis.decode(data, m)
    elif code in codes.IDENTIFIERS and code != 0:
        m.problems.append(
            f"unsupported identifier 0x{code:02X} ({codes.IDENTIFIERS[code]}): "
            "no decoder for this layout"
        )
    else:
        m.problems.append(f"unknown identifier 0x{code:02X}")


_QUANTITY_KEYS = (
    Quantity.RX_POWER,
    Quantity.TX_POWER,
    Quantity.BIAS,
    Quantity.TEMPERATURE,
    Quantity.SUPPLY,
)
_DIGITS = {
    Quantity.RX_POWER: 3,
    Quantity.TX_POWER: 3,
    Quantity.BIAS: 3,
    Quantity.TEMPERATURE: 4,
    Quantity.SUPPLY: 4,
}


def _r(value: float | None, digits: int) -> float | None:
    return None if value is None else round(value, digits)


def to_json(m: ModuleMap) -> dict[str, Any]:
    """Plain dict for json.dumps. Values in reading units; None where unavailable."""
    thresholds: dict[str, dict[str, float | None]] = {}
    for q in _QUANTITY_KEYS:
        t = m.thresholds.get(q)
        thresholds[q.label] = {
            edge: (_r(getattr(t, edge), _DIGITS[q]) if t is not None else None)
            for edge in EDGES
        }
    return {
        "spec": m.spec or None,
        "identifier": None if m.identifier is None else f"0x{m.identifier:02X}",
        "identifier_name": m.identifier_name or None,
        "form_factor": m.form_factor or None,
        "pmd": m.pmd or None,
        "media_type": m.media_type or None,
        "nominal_rate_mbd": m.nominal_rate_mbd,
        "wavelength_nm": m.wavelength_nm,
        "link_lengths_m": dict(m.link_lengths_m),
        "vendor_name": m.vendor_name or None,
        "part_number": m.part_number or None,
        "serial": m.serial or None,
        "vendor_rev": m.vendor_rev or None,
        "diagnostics": m.diagnostics,
        "rx_power_type": m.rx_power_type,
        "calibration": m.calibration,
        "module_state": m.module_state,
        "temperature_c": _r(m.temperature_c, 4),
        "supply_v": _r(m.supply_v, 4),
        "lanes": [
            {
                "lane": lane.lane,
                "rx_power_dbm": _r(lane.rx_power_dbm, 3),
                "tx_power_dbm": _r(lane.tx_power_dbm, 3),
                "bias_ma": _r(lane.bias_ma, 3),
                "rx_no_light": lane.rx_no_light,
                "tx_no_light": lane.tx_no_light,
            }
            for lane in m.lanes
        ],
        "thresholds": thresholds,
        "flags": [{"name": f.name, "lane": f.lane} for f in m.flags],
        "checksums": {
            name: {"ok": c.ok, "expected": f"0x{c.expected:02X}", "found": f"0x{c.found:02X}"}
            for name, c in m.checksums.items()
        },
        "problems": list(m.problems),
    }
