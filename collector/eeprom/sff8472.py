"""SFF-8472 (SFP/SFP+/SFP28): page A0h (bytes 0-255) then page A2h (bytes 256-511).

Offsets and units: standards.md, SFF-8472 section (verified unless marked). The link
length units of bytes 16-19 and the calibration of thresholds in externally
calibrated modules are from memory.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Callable

from lightwarden.collector import units
from lightwarden.collector.readings import Quantity, Thresholds

from . import codes
from .fields import ascii_field, check
from .result import Flag, LaneMonitor, ModuleMap

PAGE = 256
A2 = PAGE  # A2h starts right after A0h in our binary layout
FULL = 2 * PAGE

_RX_POLY = struct.Struct(">5f")  # Rx_PWR(4), (3), (2), (1), (0) at A2h 56
_LINEAR = struct.Struct(">HhHhHhHh")  # Tx_I, Tx_PWR, T, V slope/offset at A2h 76
_REALTIME = struct.Struct(">hHHHH")  # temp, Vcc, bias, Tx power, Rx power at A2h 96
_THRESH_S = struct.Struct(">4h")
_THRESH_U = struct.Struct(">4H")

#: (quantity, A2h offset of its four thresholds). source: standards.md (verified).
_THRESHOLD_BLOCKS = (
    (Quantity.TEMPERATURE, 0),
    (Quantity.SUPPLY, 8),
    (Quantity.BIAS, 16),
    (Quantity.TX_POWER, 24),
    (Quantity.RX_POWER, 32),
)
#: A2h 112/116 bits 7..0 then 113/117 bits 7..6: (label, lane, "high"|"low").
_FLAG_BITS_112 = (
    ("temperature", 0, "high"),
    ("temperature", 0, "low"),
    ("supply", 0, "high"),
    ("supply", 0, "low"),
    ("bias", 1, "high"),
    ("bias", 1, "low"),
    ("tx_power", 1, "high"),
    ("tx_power", 1, "low"),
)
_FLAG_BITS_113 = (("rx_power", 1, "high"), ("rx_power", 1, "low"))


class _Cal:
    """Raw register -> physical value, for internal or external calibration."""

    __slots__ = ("external", "linear", "rx_poly")

    def __init__(self, external: bool, a2: bytes | None) -> None:
        self.external = external
        if external and a2 is not None:
            self.rx_poly: tuple[float, ...] = _RX_POLY.unpack_from(a2, A2 + 56)
            self.linear: tuple[int, ...] = _LINEAR.unpack_from(a2, A2 + 76)
        else:
            self.rx_poly = (0.0, 0.0, 0.0, 1.0, 0.0)
            self.linear = (256, 0, 256, 0, 256, 0, 256, 0)

    def _lin(self, i: int, raw: int) -> float:
        slope, offset = self.linear[2 * i], self.linear[2 * i + 1]
        return raw * (slope / 256.0) + offset if self.external else float(raw)

    def bias_ma(self, raw: int) -> float:
        return self._lin(0, raw) * units.BIAS_LSB_MA

    def tx_units(self, raw: int) -> float:  # 0.1 uW steps
        return self._lin(1, raw)

    def temp_c(self, raw: int) -> float:
        return self._lin(2, raw) * units.TEMP_LSB_C

    def supply_v(self, raw: int) -> float:
        return self._lin(3, raw) * units.VCC_LSB_V

    def rx_units(self, raw: int) -> float:  # 0.1 uW steps
        if not self.external:
            return float(raw)
        r4, r3, r2, r1, r0 = self.rx_poly
        # Horner form. Float products overflow to inf (never raise); callers check.
        return (((r4 * raw + r3) * raw + r2) * raw + r1) * raw + r0


def _power(units_01uw: float, what: str, m: ModuleMap) -> tuple[float | None, bool]:
    """(dBm or None, no_light) from a power in 0.1 uW steps."""
    if not math.isfinite(units_01uw):
        m.problems.append(f"external calibration gives a non-finite {what}")
        return None, False
    if units_01uw <= 0.0:
        return None, True
    return units.power_dbm(units_01uw), False


def _finite(value: float, what: str, m: ModuleMap) -> float | None:
    if math.isfinite(value):
        return value
    m.problems.append(f"external calibration gives a non-finite {what}")
    return None


def _pmd(data: bytes, rate: int | None) -> str:
    ext = data[36]
    if ext in codes.EXTENDED_COMPLIANCE:
        return codes.EXTENDED_COMPLIANCE[ext][1]
    for table, byte in ((codes.SFF8472_BYTE3, data[3]), (codes.SFF8472_BYTE6, data[6])):
        for bit, name in table:
            if byte >> bit & 1:
                return name
    return ""


def _form_factor(rate: int | None, pmd: str) -> str:
    # Byte 0 says only "SFP family"; the generation follows from the signalling rate.
    if rate is not None:
        if rate >= 25000:
            return "SFP28"
        if rate >= 10000:
            return "SFP+"
        return "SFP"
    if pmd.startswith("25G"):
        return "SFP28"
    if pmd.startswith("10G"):
        return "SFP+"
    return "SFP"


def decode(data: bytes, m: ModuleMap) -> None:
    m.spec = "SFF-8472"
    n = len(data)
    if n < 64:
        m.problems.append(f"truncated: page A0h incomplete ({n} of {PAGE} bytes)")
        return
    _base(data, m)
    if n < 96:
        m.problems.append(f"truncated: page A0h incomplete ({n} of {PAGE} bytes)")
        return
    _extended(data, m)
    if n < PAGE:
        m.problems.append(f"truncated: page A0h incomplete ({n} of {PAGE} bytes)")
    if not m.diagnostics:
        m.problems.append("diagnostics not implemented (A0h byte 92 bit 6 clear)")
        if n > PAGE and any(data[PAGE:]):
            m.problems.append("page A2h present but A0h byte 92 declares no diagnostics")
        return
    if n <= PAGE:
        m.problems.append("truncated: page A2h missing")
        return
    if n < FULL:
        m.problems.append(f"truncated: page A2h incomplete ({n - PAGE} of {PAGE} bytes)")
        return
    if n > FULL:
        m.problems.append(f"unexpected {n - FULL} bytes after page A2h")
    _diagnostics(data, m)


def _base(data: bytes, m: ModuleMap) -> None:
    problems = m.problems
    rate: int | None = data[12] * 100 or None
    if data[12] == 0xFF:  # above 25.4 GBd: byte 66 holds the rate in 250 MBd steps
        rate = (data[66] * 250 or None) if len(data) >= 96 else None
    m.nominal_rate_mbd = rate
    m.pmd = _pmd(data, rate)
    m.form_factor = _form_factor(rate, m.pmd)
    cable = data[8] & 0x0C  # SFP+ passive (b2) / active (b3) cable: bytes 60-61 not a wavelength
    if not cable:
        wavelength = data[60] << 8 | data[61]
        m.wavelength_nm = float(wavelength) if wavelength else None
    lengths: dict[str, int] = {}
    smf = max(data[14] * 1000, data[15] * 100)
    for key, value in (
        ("smf", smf),
        ("om2", data[16] * 10),
        ("om1", data[17] * 10),
        ("copper" if cable else "om4", data[18] * (1 if cable else 10)),
        ("om3", data[19] * 10),
    ):
        if value:
            lengths[key] = value
    m.link_lengths_m = lengths
    m.vendor_name = ascii_field(data, 20, 16, "vendor name (A0h 20-35)", problems)
    m.part_number = ascii_field(data, 40, 16, "part number (A0h 40-55)", problems)
    m.vendor_rev = ascii_field(data, 56, 4, "vendor revision (A0h 56-59)", problems)
    check(m, "CC_BASE", data, 0, 63, 63)


def _extended(data: bytes, m: ModuleMap) -> None:
    m.serial = ascii_field(data, 68, 16, "serial number (A0h 68-83)", m.problems)
    diag = data[92]
    m.diagnostics = bool(diag & 0x40)
    check(m, "CC_EXT", data, 64, 95, 95)
    if not m.diagnostics:
        return  # without diagnostics the type and calibration bits mean nothing
    m.rx_power_type = "average" if diag & 0x08 else "oma"
    internal, external = bool(diag & 0x20), bool(diag & 0x10)
    if internal and external:
        m.problems.append("A0h byte 92 declares both internal and external calibration")
    elif not (internal or external):
        m.problems.append("A0h byte 92 declares no calibration mode; assuming internal")
    m.calibration = "external" if external and not internal else "internal"


def _threshold_block(
    data: bytes, at: int, quantity: Quantity, cal: _Cal, m: ModuleMap
) -> Thresholds | None:
    if quantity is Quantity.TEMPERATURE:
        raw = _THRESH_S.unpack_from(data, at)
    else:
        raw = _THRESH_U.unpack_from(data, at)
    if not any(raw):
        return None
    what = f"{quantity.label} threshold"
    convert: Callable[[int], float | None]
    if quantity is Quantity.TEMPERATURE:
        def convert(r: int) -> float | None:
            return _finite(cal.temp_c(r), what, m)
    elif quantity is Quantity.SUPPLY:
        def convert(r: int) -> float | None:
            return _finite(cal.supply_v(r), what, m)
    elif quantity is Quantity.BIAS:
        def convert(r: int) -> float | None:
            return _finite(cal.bias_ma(r), what, m)
    elif quantity is Quantity.TX_POWER:
        def convert(r: int) -> float | None:
            return _power(cal.tx_units(r), what, m)[0]
    else:
        def convert(r: int) -> float | None:
            return _power(cal.rx_units(r), what, m)[0]
    # Thresholds are stored like the real-time values, so external calibration applies
    # to them too (from memory; the Linux kernel SFP driver converts them the same way).
    return Thresholds(*(convert(r) for r in raw))


def _diagnostics(data: bytes, m: ModuleMap) -> None:
    cal = _Cal(m.calibration == "external", data)
    for quantity, offset in _THRESHOLD_BLOCKS:
        block = _threshold_block(data, A2 + offset, quantity, cal, m)
        if block is not None:
            m.thresholds[quantity] = block
    check(m, "CC_DMI", data, A2, A2 + 95, A2 + 95)

    t_raw, v_raw, b_raw, tx_raw, rx_raw = _REALTIME.unpack_from(data, A2 + 96)
    m.temperature_c = _finite(cal.temp_c(t_raw), "temperature", m)
    m.supply_v = _finite(cal.supply_v(v_raw), "supply voltage", m)
    rx_dbm, rx_dark = _power(cal.rx_units(rx_raw), "Rx power", m)
    tx_dbm, tx_dark = _power(cal.tx_units(tx_raw), "Tx power", m)
    m.lanes = [
        LaneMonitor(
            lane=1,
            rx_power_dbm=rx_dbm,
            tx_power_dbm=tx_dbm,
            bias_ma=_finite(cal.bias_ma(b_raw), "bias", m),
            rx_no_light=rx_dark,
            tx_no_light=tx_dark,
        )
    ]

    status = data[A2 + 110]
    flags = m.flags
    if status & 0x04:
        flags.append(Flag("tx_fault", 1))
    if status & 0x02:
        flags.append(Flag("rx_los", 1))
    if status & 0x01:
        m.problems.append("diagnostics not ready (A2h byte 110 Data_Ready_Bar set)")
    for offset, kind in ((112, "alarm"), (116, "warning")):
        hi, lo = data[A2 + offset], data[A2 + offset + 1]
        for bit, (label, lane, side) in zip(range(7, -1, -1), _FLAG_BITS_112, strict=True):
            if hi >> bit & 1:
                flags.append(Flag(f"{label}_{side}_{kind}", lane))
        for bit, (label, lane, side) in zip((7, 6), _FLAG_BITS_113, strict=True):
            if lo >> bit & 1:
                flags.append(Flag(f"{label}_{side}_{kind}", lane))
