"""SFF-8636 (QSFP+/QSFP28): lower page, then upper pages 00h, 01h, 02h, 03h, 128 bytes each.

Offsets: standards.md SFF-8636 section and a public restatement of SFF-8636 rev 2.7
(verified). The wavelength unit of bytes 186-187 (0.05 nm) and the link length
units are from memory.
"""

from __future__ import annotations

import struct

from lightwarden.collector import units
from lightwarden.collector.readings import Quantity

from . import codes
from .fields import ascii_field, check, edge_flags, thresholds_block
from .result import Flag, LaneMonitor, ModuleMap

PAGE = 128
LOWER, P00, P01, P02, P03 = 0, 128, 256, 384, 512
FULL = 640
LANES = 4

_LANES4 = struct.Struct(">4H")
#: (quantity, page 03h offset). source: standards.md (verified).
_THRESHOLD_BLOCKS = (
    (Quantity.TEMPERATURE, 128),
    (Quantity.SUPPLY, 144),
    (Quantity.RX_POWER, 176),
    (Quantity.BIAS, 184),
    (Quantity.TX_POWER, 192),
)
#: (label, first flag byte): lane 1 bits 7-4, lane 2 bits 3-0, next byte lanes 3-4.
_LANE_FLAGS = (("rx_power", 9), ("bias", 11), ("tx_power", 13))


def decode(data: bytes, m: ModuleMap) -> None:
    m.spec = "SFF-8636"
    m.form_factor = codes.FORM_FACTORS.get(data[0], "QSFP")
    m.calibration = "internal"  # SFF-8636 defines internally calibrated monitors only
    n = len(data)
    if n < PAGE:
        m.problems.append(f"truncated: lower page incomplete ({n} of {PAGE} bytes)")
        return
    flat = bool(data[2] & 0x04)  # Flat_mem: upper page 00h only
    has_00h = n >= P01
    if not has_00h:
        m.problems.append(
            "truncated: page 00h missing" if n == PAGE
            else f"truncated: page 00h incomplete ({n - P00} of {PAGE} bytes)"
        )
    tx_supported = True
    if has_00h:
        tx_supported = _identity(data, m)
    m.diagnostics = True
    _lower(data, m, tx_supported)
    if flat:
        if n > P01 and any(data[P01:]):
            m.problems.append("pages after 00h hold data but byte 2 declares flat memory")
        return
    if n < FULL:
        if has_00h:
            missing = [f"{p:02X}h" for p, start in ((1, P01), (2, P02), (3, P03))
                       if n < start + PAGE]
            m.problems.append(_missing(missing, n))
        return
    if n > FULL:
        m.problems.append(f"unexpected {n - FULL} bytes after page 03h")
    for quantity, offset in _THRESHOLD_BLOCKS:
        block = thresholds_block(data, P03 - PAGE + offset, quantity)
        if block is not None:
            m.thresholds[quantity] = block


def _missing(pages: list[str], n: int) -> str:
    if len(pages) == 1:
        return f"truncated: page {pages[0]} missing"
    return "truncated: pages " + ", ".join(pages) + " missing"


def _identity(data: bytes, m: ModuleMap) -> bool:
    """Upper page 00h. Returns whether the module measures Tx power."""
    problems = m.problems
    if data[128] != data[0]:
        problems.append(
            f"identifier differs: lower page 0x{data[0]:02X}, page 00h 0x{data[128]:02X}"
        )
    rate = data[140] * 100 or None
    if data[140] == 0xFF:  # above 25.4 GBd: byte 222 holds the rate in 250 MBd steps
        rate = data[222] * 250 or None
    m.nominal_rate_mbd = rate
    m.pmd = _pmd(data)
    copper = data[147] >> 4 >= 10  # transmitter technology 1010b-1111b: copper cable
    if not copper:
        wavelength = (data[186] << 8 | data[187]) / 20.0
        m.wavelength_nm = wavelength or None
    lengths: dict[str, int] = {}
    for key, value in (
        ("smf", data[142] * 1000),
        ("om3", data[143] * 2),
        ("om2", data[144]),
        ("om1", data[145]),
        ("copper" if copper else "om4", data[146] * (1 if copper else 2)),
    ):
        if value:
            lengths[key] = value
    m.link_lengths_m = lengths
    m.vendor_name = ascii_field(data, 148, 16, "vendor name (page 00h 148-163)", problems)
    m.part_number = ascii_field(data, 168, 16, "part number (page 00h 168-183)", problems)
    m.vendor_rev = ascii_field(data, 184, 2, "vendor revision (page 00h 184-185)", problems)
    m.serial = ascii_field(data, 196, 16, "serial number (page 00h 196-211)", problems)
    diag = data[220]
    m.rx_power_type = "average" if diag & 0x08 else "oma"
    check(m, "CC_BASE", data, 128, 191, 191)
    check(m, "CC_EXT", data, 192, 223, 223)
    return bool(diag & 0x04)


def _pmd(data: bytes) -> str:
    eth = data[131]
    ext = data[192]
    if (eth >> codes.SFF8636_EXTENDED_BIT & 1 or not eth & 0x7F) and ext:
        names = codes.EXTENDED_COMPLIANCE.get(ext)
        if names:
            return names[0]
    for bit, name in codes.SFF8636_BYTE131:
        if eth >> bit & 1:
            return name
    return ""


def _lower(data: bytes, m: ModuleMap, tx_supported: bool) -> None:
    if data[2] & 0x01:
        m.problems.append("diagnostics not ready (byte 2 Data_Not_Ready set)")
    m.temperature_c = struct.unpack_from(">h", data, 22)[0] * units.TEMP_LSB_C
    m.supply_v = (data[26] << 8 | data[27]) * units.VCC_LSB_V
    rx = _LANES4.unpack_from(data, 34)
    bias = _LANES4.unpack_from(data, 42)
    tx = _LANES4.unpack_from(data, 50)
    power = units.power_dbm
    m.lanes = [
        LaneMonitor(
            lane=i + 1,
            rx_power_dbm=power(rx[i]),
            tx_power_dbm=power(tx[i]) if tx_supported else None,
            bias_ma=bias[i] * units.BIAS_LSB_MA,
            rx_no_light=rx[i] == 0,
            tx_no_light=tx_supported and tx[i] == 0,
        )
        for i in range(LANES)
    ]
    flags = m.flags
    los, fault = data[3], data[4]
    for i in range(LANES):
        if fault >> i & 1:
            flags.append(Flag("tx_fault", i + 1))
        if los >> i & 1:
            flags.append(Flag("rx_los", i + 1))
    edge_flags(m, data[6], "temperature", 0, 7)
    edge_flags(m, data[7], "supply", 0, 7)
    for label, first in _LANE_FLAGS:
        for lane in range(LANES):
            byte = data[first + lane // 2]
            edge_flags(m, byte, label, lane + 1, 7 if lane % 2 == 0 else 3)
