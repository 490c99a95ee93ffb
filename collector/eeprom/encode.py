"""Build memory maps from chosen values: for tests and for the fictional lab's optics.

Values go in as readings (dBm, mA, C, V) and thresholds as ``Thresholds`` in the same
units; the encoders return bytes in our binary layout, which ``decode`` reads back
within one register step. Flags are derived from the values and thresholds unless
given explicitly. Encoders raise ValueError on values they cannot represent (an
unknown PMD name, a slope of zero): they are for building test data, not for input.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass

from lightwarden.collector.readings import Quantity, Thresholds

from . import codes, units
from .result import EDGES

ThresholdInput = Mapping[Quantity | str, Thresholds] | None
LaneValues = Sequence[float | None] | float | None
FlagInput = Iterable[tuple[str, int]] | None


@dataclass(slots=True, frozen=True)
class ExternalCalibration:
    """SFF-8472 external calibration constants (A2h 56-91).

    ``rx_poly`` is Rx_PWR(4), (3), (2), (1), (0); the linear pairs are (slope, offset)
    with the slope a multiple of 1/256 in 0..255.996 and the offset a signed 16-bit
    number in result units (1/256 C, 100 uV, 2 uA, 0.1 uW).
    """

    rx_poly: tuple[float, float, float, float, float] = (0.0, 0.0, 0.0, 1.0, 0.0)
    bias: tuple[float, int] = (1.0, 0)
    tx_power: tuple[float, int] = (1.0, 0)
    temperature: tuple[float, int] = (1.0, 0)
    supply: tuple[float, int] = (1.0, 0)


# ---------------------------------------------------------------- shared helpers


def _text(buf: bytearray, at: int, length: int, value: str) -> None:
    raw = value.encode("ascii", "replace")[:length]
    buf[at : at + length] = raw.ljust(length, b" ")


def _put_u16(buf: bytearray, at: int, value: int) -> None:
    struct.pack_into(">H", buf, at, min(max(int(value), 0), 0xFFFF))


def _put_s16(buf: bytearray, at: int, value: int) -> None:
    struct.pack_into(">h", buf, at, min(max(int(value), -0x8000), 0x7FFF))


def _thresholds(given: ThresholdInput) -> dict[Quantity, Thresholds]:
    out: dict[Quantity, Thresholds] = {}
    by_label = {q.label: q for q in Quantity}
    for key, value in (given or {}).items():
        q = key if isinstance(key, Quantity) else by_label[str(key)]
        out[q] = value
    return out


def _raw_threshold(q: Quantity, value: float | None, bias_multiplier: int = 1) -> int:
    if value is None:
        return 0
    if q is Quantity.TEMPERATURE:
        return units.temp_raw(value)
    if q is Quantity.SUPPLY:
        return units.vcc_raw(value)
    if q is Quantity.BIAS:
        return units.bias_raw(value, bias_multiplier)
    return units.power_raw(value)


def _put_thresholds(
    buf: bytearray, at: int, q: Quantity, t: Thresholds | None, bias_multiplier: int = 1
) -> None:
    if t is None:
        return
    for i, edge in enumerate(EDGES):
        raw = _raw_threshold(q, getattr(t, edge), bias_multiplier)
        if q is Quantity.TEMPERATURE:
            _put_s16(buf, at + 2 * i, raw)
        else:
            _put_u16(buf, at + 2 * i, raw)


def _lanes(values: LaneValues, count: int) -> list[float | None]:
    if values is None or isinstance(values, int | float):
        return [values] * count
    out = list(values)
    if len(out) != count:
        raise ValueError(f"expected {count} lane values, got {len(out)}")
    return out


def derive_flags(
    thresholds: Mapping[Quantity, Thresholds],
    module: Mapping[Quantity, float | None],
    lanes: Mapping[Quantity, Sequence[float | None]],
) -> set[tuple[str, int]]:
    """Alarm/warning flags a module would raise for these values, plus rx_los for dark
    receivers. Names match the decoder: "rx_power_low_alarm", "temperature_high_warning".
    """
    flags: set[tuple[str, int]] = set()

    def compare(q: Quantity, value: float | None, lane: int) -> None:
        t = thresholds.get(q)
        if t is None:
            return
        v = -math.inf if value is None else value
        for edge in EDGES:
            limit = getattr(t, edge)
            if limit is None:
                continue
            if (edge.startswith("high") and v > limit) or (edge.startswith("low") and v < limit):
                flags.add((f"{q.label}_{edge}", lane))

    for q, value in module.items():
        if value is not None:
            compare(q, value, 0)
    for q, per_lane in lanes.items():
        for i, value in enumerate(per_lane):
            if value is None and q is not Quantity.RX_POWER:
                continue  # an unmeasured Tx/bias raises nothing
            compare(q, value, i + 1)
            if q is Quantity.RX_POWER and value is None:
                flags.add(("rx_los", i + 1))
    return flags


def _find_code(name: str, tables: Iterable[Mapping[int, str]]) -> int | None:
    for table in tables:
        for code, value in table.items():
            if value == name:
                return code
    return None


# ---------------------------------------------------------------- SFF-8472


def _sff8472_pmd(a0: bytearray, pmd: str) -> None:
    if not pmd:
        return
    for bit, name in codes.SFF8472_BYTE3:
        if name == pmd:
            a0[3] |= 1 << bit
            return
    for bit, name in codes.SFF8472_BYTE6:
        if name == pmd:
            a0[6] |= 1 << bit
            return
    for code, (_, one_lane) in codes.EXTENDED_COMPLIANCE.items():
        if one_lane == pmd:
            a0[36] = code
            return
    raise ValueError(f"no SFF-8472 compliance code for PMD {pmd!r}")


def _ext_adc(value_units: float, pair: tuple[float, int], signed: bool = False) -> int:
    slope, offset = pair
    slope_fixed = round(slope * 256) / 256.0
    if slope_fixed <= 0:
        raise ValueError("external calibration slope must be positive")
    raw = round((value_units - offset) / slope_fixed)
    return min(max(raw, -0x8000 if signed else 0), 0x7FFF if signed else 0xFFFF)


def _rx_adc(power_units: float, poly: tuple[float, ...]) -> int:
    """Smallest-error ADC value for a power under a rising Rx polynomial (bisection)."""
    r = [struct.unpack(">f", struct.pack(">f", c))[0] for c in poly]  # as stored

    def f(x: int) -> float:
        return (((r[0] * x + r[1]) * x + r[2]) * x + r[3]) * x + r[4]

    lo, hi = 0, 0xFFFF
    while lo < hi:
        mid = (lo + hi) // 2
        if f(mid) < power_units:
            lo = mid + 1
        else:
            hi = mid
    if lo > 0 and abs(f(lo - 1) - power_units) < abs(f(lo) - power_units):
        lo -= 1
    return lo


def encode_sff8472(
    *,
    vendor_name: str = "HARROWGATE OPTIX",
    part_number: str = "HG-S10-LR",
    serial: str = "HG00000001",
    vendor_rev: str = "A",
    pmd: str = "10GBASE-LR",
    wavelength_nm: float | None = 1310,
    nominal_rate_mbd: int | None = 10300,
    link_lengths_m: Mapping[str, int] | None = None,
    diagnostics: bool = True,
    rx_power_type: str = "average",
    calibration: str = "internal",
    external: ExternalCalibration | None = None,
    temperature_c: float = 35.0,
    supply_v: float = 3.3,
    rx_power_dbm: float | None = -5.0,
    tx_power_dbm: float | None = -2.0,
    bias_ma: float = 30.0,
    thresholds: ThresholdInput = None,
    flags: FlagInput = None,
    tx_fault: bool = False,
    bad_checksum: str | None = None,
) -> bytes:
    """A0h + A2h (512 bytes; 256 when ``diagnostics`` is False).

    ``rx_power_dbm=None`` is a dark receiver (register 0). ``bad_checksum`` names a check
    byte to spoil: "CC_BASE", "CC_EXT" or "CC_DMI".
    """
    a0 = bytearray(256)
    a0[0] = 0x03
    a0[1] = 0x04  # serial ID defined by the two-wire interface (from memory)
    a0[2] = 0x07  # LC connector (SFF-8024, from memory)
    _sff8472_pmd(a0, pmd)
    if nominal_rate_mbd:
        if nominal_rate_mbd > 25400:
            a0[12] = 0xFF
            a0[66] = min(round(nominal_rate_mbd / 250), 255)
        else:
            a0[12] = min(round(nominal_rate_mbd / 100), 254)
    lengths = dict(link_lengths_m or ({"smf": 10000} if "LR" in pmd else {}))
    smf = lengths.get("smf", 0)
    a0[14] = min(smf // 1000, 255)
    a0[15] = min(smf // 100, 255)
    a0[16] = min(lengths.get("om2", 0) // 10, 255)
    a0[17] = min(lengths.get("om1", 0) // 10, 255)
    a0[18] = min(lengths.get("om4", 0) // 10, 255)
    a0[19] = min(lengths.get("om3", 0) // 10, 255)
    _text(a0, 20, 16, vendor_name)
    _text(a0, 40, 16, part_number)
    _text(a0, 56, 4, vendor_rev)
    if wavelength_nm:
        _put_u16(a0, 60, round(wavelength_nm))
    a0[63] = units.checksum(a0, 0, 63)
    _text(a0, 68, 16, serial)
    _text(a0, 84, 8, "240115")
    diag = 0
    if diagnostics:
        diag |= 0x40 | (0x10 if calibration == "external" else 0x20)
    if rx_power_type == "average":
        diag |= 0x08
    a0[92] = diag
    a0[93] = 0xF0 if diagnostics else 0  # alarm/warning flags, soft TX_DISABLE/FAULT/LOS
    a0[94] = 0x08 if diagnostics else 0  # SFF-8472 revision level (from memory)
    a0[95] = units.checksum(a0, 64, 95)
    if bad_checksum == "CC_BASE":
        a0[63] = (a0[63] + 1) & 0xFF
    if bad_checksum == "CC_EXT":
        a0[95] = (a0[95] + 1) & 0xFF
    if not diagnostics:
        return bytes(a0)

    a2 = bytearray(256)
    th = _thresholds(thresholds)
    ext = external if calibration == "external" else None
    if ext is not None:
        struct.pack_into(">5f", a2, 56, *ext.rx_poly)
        for at, (slope, offset) in zip(
            (76, 80, 84, 88), (ext.bias, ext.tx_power, ext.temperature, ext.supply), strict=True
        ):
            _put_u16(a2, at, round(slope * 256))
            _put_s16(a2, at + 2, offset)

    def raw_for(q: Quantity, value: float | None) -> int:
        """Register value that decodes to ``value`` under the chosen calibration."""
        if value is None:
            return 0
        if ext is None:
            return _raw_threshold(q, value)
        if q is Quantity.TEMPERATURE:
            return _ext_adc(value / units.TEMP_LSB_C, ext.temperature, signed=True)
        if q is Quantity.SUPPLY:
            return _ext_adc(value / units.VCC_LSB_V, ext.supply)
        if q is Quantity.BIAS:
            return _ext_adc(value / units.BIAS_LSB_MA, ext.bias)
        power_units = 10.0 ** (value / 10.0) / units.POWER_LSB_MW
        if q is Quantity.TX_POWER:
            return _ext_adc(power_units, ext.tx_power)
        return _rx_adc(power_units, ext.rx_poly)

    blocks = (
        (Quantity.TEMPERATURE, 0),
        (Quantity.SUPPLY, 8),
        (Quantity.BIAS, 16),
        (Quantity.TX_POWER, 24),
        (Quantity.RX_POWER, 32),
    )
    for q, at in blocks:
        t = th.get(q)
        if t is None:
            continue
        for i, edge in enumerate(EDGES):
            raw = raw_for(q, getattr(t, edge))
            (_put_s16 if q is Quantity.TEMPERATURE else _put_u16)(a2, at + 2 * i, raw)
    _put_s16(a2, 96, raw_for(Quantity.TEMPERATURE, temperature_c))
    _put_u16(a2, 98, raw_for(Quantity.SUPPLY, supply_v))
    _put_u16(a2, 100, raw_for(Quantity.BIAS, bias_ma))
    _put_u16(a2, 102, raw_for(Quantity.TX_POWER, tx_power_dbm))
    _put_u16(a2, 104, raw_for(Quantity.RX_POWER, rx_power_dbm))

    if flags is None:
        flag_set = derive_flags(
            th,
            {Quantity.TEMPERATURE: temperature_c, Quantity.SUPPLY: supply_v},
            {
                Quantity.RX_POWER: [rx_power_dbm],
                Quantity.TX_POWER: [tx_power_dbm],
                Quantity.BIAS: [bias_ma],
            },
        )
    else:
        flag_set = set(flags)
    if tx_fault:
        flag_set.add(("tx_fault", 1))
    status = 0
    if ("tx_fault", 1) in flag_set:
        status |= 0x04
    if ("rx_los", 1) in flag_set:
        status |= 0x02
    a2[110] = status
    order = ("temperature", "supply", "bias", "tx_power")
    for at, kind in ((112, "alarm"), (116, "warning")):
        byte = 0
        for i, label in enumerate(order):
            lane = 0 if label in ("temperature", "supply") else 1
            if (f"{label}_high_{kind}", lane) in flag_set:
                byte |= 0x80 >> (2 * i)
            if (f"{label}_low_{kind}", lane) in flag_set:
                byte |= 0x40 >> (2 * i)
        a2[at] = byte
        second = 0
        if (f"rx_power_high_{kind}", 1) in flag_set:
            second |= 0x80
        if (f"rx_power_low_{kind}", 1) in flag_set:
            second |= 0x40
        a2[at + 1] = second
    a2[95] = units.checksum(a2, 0, 95)
    if bad_checksum == "CC_DMI":
        a2[95] = (a2[95] + 1) & 0xFF
    return bytes(a0 + a2)


# ---------------------------------------------------------------- SFF-8636


def _edge_bits(flag_set: set[tuple[str, int]], label: str, lane: int) -> int:
    """Four bits HA, LA, HW, LW (HA highest) for one label/lane."""
    bits = 0
    for i, edge in enumerate(EDGES):
        if (f"{label}_{edge}", lane) in flag_set:
            bits |= 0x8 >> i
    return bits


def _device_tech(wavelength_nm: float | None) -> int:
    if wavelength_nm is None or wavelength_nm < 900:
        return 0x00  # 850 nm VCSEL
    return 0x40 if wavelength_nm < 1400 else 0x50  # 1310 / 1550 nm DFB


def encode_sff8636(
    *,
    identifier: int = 0x11,
    vendor_name: str = "HARROWGATE OPTIX",
    part_number: str = "HG-Q100-LR4",
    serial: str = "HG00000002",
    vendor_rev: str = "A0",
    pmd: str = "100GBASE-LR4",
    wavelength_nm: float | None = 1310,
    nominal_rate_mbd: int | None = 25800,
    link_lengths_m: Mapping[str, int] | None = None,
    rx_power_type: str = "average",
    tx_power_supported: bool = True,
    temperature_c: float = 35.0,
    supply_v: float = 3.3,
    rx_power_dbm: LaneValues = -3.0,
    tx_power_dbm: LaneValues = 0.0,
    bias_ma: LaneValues = 40.0,
    thresholds: ThresholdInput = None,
    flags: FlagInput = None,
    tx_fault_lanes: Iterable[int] = (),
    bad_checksum: str | None = None,
) -> bytes:
    """Lower page + upper 00h, 01h, 02h, 03h (640 bytes), 4 lanes.

    Lane values may be one number for all lanes or four; None in rx is a dark lane.
    ``bad_checksum``: "CC_BASE" or "CC_EXT".
    """
    rx, tx, bias = _lanes(rx_power_dbm, 4), _lanes(tx_power_dbm, 4), _lanes(bias_ma, 4)
    m = bytearray(640)
    m[0] = identifier
    m[1] = 0x08  # revision compliance (from memory)
    _put_s16(m, 22, units.temp_raw(temperature_c))
    _put_u16(m, 26, units.vcc_raw(supply_v))
    for i in range(4):
        _put_u16(m, 34 + 2 * i, units.power_raw(rx[i]))
        _put_u16(m, 42 + 2 * i, 0 if bias[i] is None else units.bias_raw(bias[i]))
        _put_u16(m, 50 + 2 * i, units.power_raw(tx[i]) if tx_power_supported else 0)
    th = _thresholds(thresholds)
    if flags is None:
        flag_set = derive_flags(
            th,
            {Quantity.TEMPERATURE: temperature_c, Quantity.SUPPLY: supply_v},
            {
                Quantity.RX_POWER: rx,
                Quantity.TX_POWER: tx if tx_power_supported else [],
                Quantity.BIAS: bias,
            },
        )
    else:
        flag_set = set(flags)
    flag_set.update(("tx_fault", lane) for lane in tx_fault_lanes)
    for lane in range(1, 5):
        if ("rx_los", lane) in flag_set:
            m[3] |= 1 << (lane - 1)
        if ("tx_fault", lane) in flag_set:
            m[4] |= 1 << (lane - 1)
    m[6] = _edge_bits(flag_set, "temperature", 0) << 4
    m[7] = _edge_bits(flag_set, "supply", 0) << 4
    for label, first in (("rx_power", 9), ("bias", 11), ("tx_power", 13)):
        for lane in range(1, 5):
            shift = 4 if lane % 2 else 0
            m[first + (lane - 1) // 2] |= _edge_bits(flag_set, label, lane) << shift

    m[128] = identifier
    m[130] = 0x07 if "SR4" not in pmd else 0x0C  # LC, or MPO for parallel fibre
    _sff8636_pmd(m, pmd)
    if nominal_rate_mbd:
        if nominal_rate_mbd > 25400:
            m[140] = 0xFF
            m[222] = min(round(nominal_rate_mbd / 250), 255)
        else:
            m[140] = min(round(nominal_rate_mbd / 100), 254)
    lengths = dict(link_lengths_m or ({"smf": 10000} if "LR" in pmd else {}))
    m[142] = min(lengths.get("smf", 0) // 1000, 255)
    m[143] = min(lengths.get("om3", 0) // 2, 255)
    m[144] = min(lengths.get("om2", 0), 255)
    m[145] = min(lengths.get("om1", 0), 255)
    m[146] = min(lengths.get("om4", 0) // 2, 255)
    m[147] = _device_tech(wavelength_nm)
    _text(m, 148, 16, vendor_name)
    _text(m, 168, 16, part_number)
    _text(m, 184, 2, vendor_rev)
    if wavelength_nm:
        _put_u16(m, 186, round(wavelength_nm * 20))
    m[191] = units.checksum(m, 128, 191)
    _text(m, 196, 16, serial)
    _text(m, 212, 8, "240115  ")
    m[220] = 0x30 | (0x08 if rx_power_type == "average" else 0) | (
        0x04 if tx_power_supported else 0
    )
    m[223] = units.checksum(m, 192, 223)
    if bad_checksum == "CC_BASE":
        m[191] = (m[191] + 1) & 0xFF
    if bad_checksum == "CC_EXT":
        m[223] = (m[223] + 1) & 0xFF
    p03 = 512 - 128
    for q, at in (
        (Quantity.TEMPERATURE, 128),
        (Quantity.SUPPLY, 144),
        (Quantity.RX_POWER, 176),
        (Quantity.BIAS, 184),
        (Quantity.TX_POWER, 192),
    ):
        _put_thresholds(m, p03 + at, q, th.get(q))
    return bytes(m)


def _sff8636_pmd(m: bytearray, pmd: str) -> None:
    if not pmd:
        return
    for bit, name in codes.SFF8636_BYTE131:
        if name == pmd:
            m[131] |= 1 << bit
            return
    for code, (four_lane, _) in codes.EXTENDED_COMPLIANCE.items():
        if four_lane == pmd:
            m[131] |= 1 << codes.SFF8636_EXTENDED_BIT
            m[192] = code
            return
    raise ValueError(f"no SFF-8636 compliance code for PMD {pmd!r}")


# ---------------------------------------------------------------- CMIS


_CMIS_STATE_CODES = {name: code for code, name in codes.CMIS_MODULE_STATES.items()}


def encode_cmis(
    *,
    identifier: int = 0x18,
    vendor_name: str = "HARROWGATE OPTIX",
    part_number: str = "HG-D400-DR4",
    serial: str = "HG00000003",
    vendor_rev: str = "01",
    pmd: str = "400GBASE-DR4",
    wavelength_nm: float | None = 1311,
    link_lengths_m: Mapping[str, int] | None = None,
    lanes: int | None = None,
    module_state: str = "ready",
    rx_power_type: str = "average",
    bias_multiplier: int = 1,
    temperature_c: float = 40.0,
    supply_v: float = 3.3,
    rx_power_dbm: LaneValues = -2.0,
    tx_power_dbm: LaneValues = 1.0,
    bias_ma: LaneValues = 60.0,
    thresholds: ThresholdInput = None,
    flags: FlagInput = None,
    tx_fault_lanes: Iterable[int] = (),
    bad_checksum: str | None = None,
) -> bytes:
    """Lower page + upper 00h, 01h, 02h, 03h, 10h, 11h (896 bytes), up to 8 lanes.

    ``lanes`` defaults to the number of lane values given (or 4 when all are scalar).
    ``bad_checksum``: "page 00h", "page 01h" or "page 02h".
    """
    if lanes is None:
        given = [v for v in (rx_power_dbm, tx_power_dbm, bias_ma) if isinstance(v, Sequence)]
        lanes = len(given[0]) if given else 4
    if not 1 <= lanes <= 8:
        raise ValueError("CMIS lanes must be 1..8")
    if bias_multiplier not in (1, 2, 4):
        raise ValueError("bias_multiplier must be 1, 2 or 4")
    rx, tx = _lanes(rx_power_dbm, lanes), _lanes(tx_power_dbm, lanes)
    bias = _lanes(bias_ma, lanes)
    m = bytearray(896)
    m[0] = identifier
    m[1] = 0x50  # CMIS 5.0
    m[3] = _CMIS_STATE_CODES[module_state] << 1
    _put_s16(m, 14, units.temp_raw(temperature_c))
    _put_u16(m, 16, units.vcc_raw(supply_v))

    if pmd in codes.CMIS_SMF_MEDIA.values():
        m[85] = 0x02
        m[87] = _find_code(pmd, [codes.CMIS_SMF_MEDIA]) or 0
    elif pmd in codes.CMIS_MMF_MEDIA.values():
        m[85] = 0x01
        m[87] = _find_code(pmd, [codes.CMIS_MMF_MEDIA]) or 0
    elif pmd:
        raise ValueError(f"no CMIS media interface code for PMD {pmd!r}")
    m[88] = (lanes << 4 | lanes) & 0xFF  # host and media lane counts of application 1
    m[89] = 0x01
    m[90] = 0xFF  # no second application (from memory)

    th = _thresholds(thresholds)
    if flags is None:
        flag_set = derive_flags(
            th,
            {Quantity.TEMPERATURE: temperature_c, Quantity.SUPPLY: supply_v},
            {Quantity.RX_POWER: rx, Quantity.TX_POWER: tx, Quantity.BIAS: bias},
        )
    else:
        flag_set = set(flags)
    flag_set.update(("tx_fault", lane) for lane in tx_fault_lanes)
    module_flags = 0
    for i, edge in enumerate(EDGES):
        if (f"temperature_{edge}", 0) in flag_set:
            module_flags |= 1 << i
        if (f"supply_{edge}", 0) in flag_set:
            module_flags |= 1 << (i + 4)
    m[9] = module_flags

    def at(page: int, offset: int) -> int:
        return page * 128 + offset - 128

    m[at(1, 128)] = identifier
    _text(m, at(1, 129), 16, vendor_name)
    _text(m, at(1, 148), 16, part_number)
    _text(m, at(1, 164), 2, vendor_rev)
    _text(m, at(1, 166), 16, serial)
    _text(m, at(1, 182), 8, "240115  ")
    m[at(1, 203)] = 0x0C if "DR4" in pmd or "SR" in pmd else 0x07  # MPO / LC (from memory)
    m[at(1, 222)] = units.checksum(m, at(1, 128), at(1, 222))

    lengths = dict(link_lengths_m or ({"smf": 500} if "DR" in pmd else {}))
    smf = lengths.get("smf", 0)
    if smf and smf % 1000 == 0 and smf // 1000 <= 63:
        m[at(2, 132)] = 0x40 | smf // 1000
    else:
        m[at(2, 132)] = min(round(smf / 100), 63)
    m[at(2, 133)] = min(lengths.get("om5", 0) // 2, 255)
    m[at(2, 134)] = min(lengths.get("om4", 0) // 2, 255)
    m[at(2, 135)] = min(lengths.get("om3", 0) // 2, 255)
    m[at(2, 136)] = min(lengths.get("om2", 0), 255)
    if wavelength_nm:
        _put_u16(m, at(2, 138), round(wavelength_nm * 20))
    if rx_power_type == "average":
        m[at(2, 151)] = 0x10
    m[at(2, 160)] = 0x07 | {1: 0, 2: 1, 4: 2}[bias_multiplier] << 3
    m[at(2, 255)] = units.checksum(m, at(2, 130), at(2, 255))

    for q, offset in (
        (Quantity.TEMPERATURE, 128),
        (Quantity.SUPPLY, 136),
        (Quantity.TX_POWER, 176),
        (Quantity.BIAS, 184),
        (Quantity.RX_POWER, 192),
    ):
        _put_thresholds(m, at(3, offset), q, th.get(q), bias_multiplier)
    m[at(3, 255)] = units.checksum(m, at(3, 128), at(3, 255))

    p11 = 6
    for i in range(lanes):
        _put_u16(m, at(p11, 154) + 2 * i, units.power_raw(tx[i]))
        b = bias[i]
        _put_u16(m, at(p11, 170) + 2 * i, 0 if b is None else units.bias_raw(b, bias_multiplier))
        _put_u16(m, at(p11, 186) + 2 * i, units.power_raw(rx[i]))
        bit = 1 << i
        lane = i + 1
        if ("tx_fault", lane) in flag_set:
            m[at(p11, 135)] |= bit
        if ("rx_los", lane) in flag_set:
            m[at(p11, 147)] |= bit
        for label, first in (("tx_power", 139), ("bias", 143), ("rx_power", 149)):
            for k, edge in enumerate(EDGES):
                if (f"{label}_{edge}", lane) in flag_set:
                    m[at(p11, first + k)] |= bit
    if bad_checksum is not None:
        page = {"page 00h": 1, "page 01h": 2, "page 02h": 3}[bad_checksum]
        pos = at(page, 222) if page == 1 else at(page, 255)
        m[pos] = (m[pos] + 1) & 0xFF
    return bytes(m)
