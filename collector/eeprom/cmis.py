"""CMIS (QSFP-DD, OSFP, QSFP with CMIS): lower page, then upper pages 00h, 01h, 02h,
03h, 10h and 11h, 128 bytes each, in that order. A page the module lacks is zero-filled.

Offsets: standards.md CMIS section and a public restatement of CMIS 4.0/5.2 (verified):
lower page flags byte 9, media type byte 85; page 00h vendor fields; page 01h link
lengths 132-136, wavelength 138-139, byte 151 bit 4, byte 160; page 02h thresholds;
page 11h flags 135-152 and monitors 154-201. From memory: units of link lengths and
wavelength, the polarity of byte 151 bit 4 (1 = average), the application descriptor
layout (bytes 86-89), and the check-byte ranges of pages 00h, 01h and 02h.
"""

from __future__ import annotations

import struct

from lightwarden.collector import units
from lightwarden.collector.readings import Quantity

from . import codes
from .fields import ascii_field, check, thresholds_block
from .result import Flag, LaneMonitor, ModuleMap

PAGE = 128
PAGES = ("lower", "00h", "01h", "02h", "03h", "10h", "11h")
START = {name: i * PAGE for i, name in enumerate(PAGES)}
FULL = len(PAGES) * PAGE
MAX_LANES = 8

_LANES8 = struct.Struct(">8H")
#: (quantity, page 02h offset). source: standards.md (verified).
_THRESHOLD_BLOCKS = (
    (Quantity.TEMPERATURE, 128),
    (Quantity.SUPPLY, 136),
    (Quantity.TX_POWER, 176),
    (Quantity.BIAS, 184),
    (Quantity.RX_POWER, 192),
)
#: Page 11h per-lane flag bytes (bit i = lane i+1): label -> first of HA, LA, HW, LW.
_LANE_EDGE_BYTES = (("tx_power", 139), ("bias", 143), ("rx_power", 149))
_EDGES = ("high_alarm", "low_alarm", "high_warning", "low_warning")
_BIAS_MULTIPLIER = (1, 2, 4, 1)  # page 01h byte 160 bits 4-3; 11b is reserved


def _at(page: str, offset: int) -> int:
    """Absolute position of an upper-page byte given by its 128-255 address."""
    return START[page] + offset - PAGE


def decode(data: bytes, m: ModuleMap) -> None:
    m.spec = "CMIS"
    m.form_factor = codes.FORM_FACTORS.get(data[0], "")
    m.calibration = "internal"
    n = len(data)
    if n < PAGE:
        m.problems.append(f"truncated: lower page incomplete ({n} of {PAGE} bytes)")
        return
    flat = bool(data[2] & 0x80)  # flat memory: lower page and page 00h only
    _lower(data, m)
    if n < 2 * PAGE:
        m.problems.append(
            "truncated: page 00h missing" if n == PAGE
            else f"truncated: page 00h incomplete ({n - PAGE} of {PAGE} bytes)"
        )
        return
    _page00(data, m)
    if flat:
        m.diagnostics = False
        if n > 2 * PAGE and any(data[2 * PAGE :]):
            m.problems.append("pages after 00h hold data but byte 2 declares flat memory")
        return
    if n < FULL:
        missing = [p for p in PAGES if n < START[p] + PAGE]
        if len(missing) == 1:
            m.problems.append(f"truncated: page {missing[0]} missing")
        else:
            m.problems.append("truncated: pages " + ", ".join(missing) + " missing")
        # Decode what the present pages allow; lane data needs 01h and 11h.
    elif n > FULL:
        m.problems.append(f"unexpected {n - FULL} bytes after page 11h")
    multiplier = 1
    monitors = 0
    if n >= START["01h"] + PAGE:
        monitors, multiplier = _page01(data, m)
    if n >= START["02h"] + PAGE:
        _page02(data, m, multiplier)
    if n >= START["11h"] + PAGE:
        _page11(data, m, monitors, multiplier)


def _lower(data: bytes, m: ModuleMap) -> None:
    state_code = data[3] >> 1 & 0x07
    m.module_state = codes.CMIS_MODULE_STATES.get(state_code, f"reserved ({state_code})")
    if state_code == 5:
        m.problems.append("module reports its fault state (lower page byte 3)")
    m.temperature_c = struct.unpack_from(">h", data, 14)[0] * units.TEMP_LSB_C
    m.supply_v = (data[16] << 8 | data[17]) * units.VCC_LSB_V
    flags = data[9]
    for i, edge in enumerate(_EDGES):  # bits 0-3 temperature, 4-7 supply
        if flags >> i & 1:
            m.flags.append(Flag(f"temperature_{edge}", 0))
        if flags >> (i + 4) & 1:
            m.flags.append(Flag(f"supply_{edge}", 0))
    media = codes.CMIS_MEDIA_TYPES.get(data[85], "")
    m.media_type = media
    code = data[87]  # media interface ID of application 1
    table = {"smf": codes.CMIS_SMF_MEDIA, "mmf": codes.CMIS_MMF_MEDIA}.get(media, {})
    m.pmd = table.get(code, "")


def _page00(data: bytes, m: ModuleMap) -> None:
    problems = m.problems
    if data[128] != data[0]:
        problems.append(
            f"identifier differs: lower page 0x{data[0]:02X}, page 00h 0x{data[128]:02X}"
        )
    m.vendor_name = ascii_field(data, 129, 16, "vendor name (page 00h 129-144)", problems)
    m.part_number = ascii_field(data, 148, 16, "part number (page 00h 148-163)", problems)
    m.vendor_rev = ascii_field(data, 164, 2, "vendor revision (page 00h 164-165)", problems)
    m.serial = ascii_field(data, 166, 16, "serial number (page 00h 166-181)", problems)
    check(m, "page 00h", data, 128, 222, 222)


def _page01(data: bytes, m: ModuleMap) -> tuple[int, int]:
    """Returns (lane monitor support bits, bias multiplier)."""
    p = _at("01h", 128)
    smf = data[p + 4]
    scale = (100, 1000, 0, 0)[smf >> 6]  # bits 7-6: 0.1 km or 1 km steps
    lengths: dict[str, int] = {}
    for key, value in (
        ("smf", (smf & 0x3F) * scale),
        ("om5", data[p + 5] * 2),
        ("om4", data[p + 6] * 2),
        ("om3", data[p + 7] * 2),
        ("om2", data[p + 8]),
    ):
        if value:
            lengths[key] = value
    m.link_lengths_m = lengths
    wavelength = (data[p + 10] << 8 | data[p + 11]) / 20.0
    m.wavelength_nm = wavelength or None
    m.rx_power_type = "average" if data[p + 23] & 0x10 else "oma"
    adv = data[p + 32]  # byte 160
    monitors = adv & 0x07
    m.diagnostics = bool(monitors)
    check(m, "page 01h", data, p + 2, p + 127, p + 127)
    return monitors, _BIAS_MULTIPLIER[adv >> 3 & 0x03]


def _page02(data: bytes, m: ModuleMap, multiplier: int) -> None:
    for quantity, offset in _THRESHOLD_BLOCKS:
        block = thresholds_block(data, _at("02h", offset), quantity, multiplier)
        if block is not None:
            m.thresholds[quantity] = block
    p = _at("02h", 128)
    check(m, "page 02h", data, p, p + 127, p + 127)


def _lane_count(data: bytes) -> int:
    media_lanes = data[88] & 0x0F  # application 1: media lane count (from memory)
    return media_lanes if 0 < media_lanes <= MAX_LANES else MAX_LANES


def _page11(data: bytes, m: ModuleMap, monitors: int, multiplier: int) -> None:
    lanes = _lane_count(data)
    tx = _LANES8.unpack_from(data, _at("11h", 154))
    bias = _LANES8.unpack_from(data, _at("11h", 170))
    rx = _LANES8.unpack_from(data, _at("11h", 186))
    has_bias, has_tx, has_rx = monitors & 1, monitors & 2, monitors & 4
    step = units.BIAS_LSB_MA * multiplier
    power = units.power_dbm
    m.lanes = [
        LaneMonitor(
            lane=i + 1,
            rx_power_dbm=power(rx[i]) if has_rx else None,
            tx_power_dbm=power(tx[i]) if has_tx else None,
            bias_ma=bias[i] * step if has_bias else None,
            rx_no_light=bool(has_rx) and rx[i] == 0,
            tx_no_light=bool(has_tx) and tx[i] == 0,
        )
        for i in range(lanes)
    ]
    fault = data[_at("11h", 135)]
    los = data[_at("11h", 147)]
    for i in range(lanes):
        if fault >> i & 1:
            m.flags.append(Flag("tx_fault", i + 1))
        if los >> i & 1:
            m.flags.append(Flag("rx_los", i + 1))
    for label, first in _LANE_EDGE_BYTES:
        for k, edge in enumerate(_EDGES):
            byte = data[_at("11h", first + k)]
            for i in range(lanes):
                if byte >> i & 1:
                    m.flags.append(Flag(f"{label}_{edge}", i + 1))
