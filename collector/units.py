"""Unit conversions for every source and decoder: optical power (mW, W, dBm) and the
16-bit monitor registers of module memory maps.

dBm is 10*log10(P / 1 mW) (definition). SFF-8472, SFF-8636 and CMIS use the same units
for their 16-bit monitors (source: standards.md, SFF-8472 rows "temperature/Vcc/bias/Tx/Rx
power LSB" and the SFF-8636 "units: as SFF-8472" row; CMIS units from memory).
"""

from __future__ import annotations

import math

TEMP_LSB_C = 1.0 / 256.0  # signed
VCC_LSB_V = 100e-6
BIAS_LSB_MA = 0.002  # 2 uA
POWER_LSB_MW = 1e-4  # 0.1 uW

_U16_MAX = 0xFFFF


def mw_to_dbm(milliwatts: float) -> float:
    """10*log10(P/1 mW). Callers handle P <= 0 (no light) before calling."""
    return 10.0 * math.log10(milliwatts)


def watts_to_dbm(watts: float) -> float:
    return mw_to_dbm(watts * 1000.0)


def dbm_to_mw(dbm: float) -> float:
    return math.pow(10.0, dbm / 10.0)


def power_dbm(raw: float) -> float | None:
    """Optical power register (0.1 uW steps) to dBm; zero or less is no light (None)."""
    if not raw > 0.0:  # also catches NaN
        return None
    return mw_to_dbm(raw * POWER_LSB_MW)


def power_raw(dbm: float | None) -> int:
    """dBm to the nearest register value; None (no light) is 0. Clamped to 1..65535."""
    if dbm is None or dbm == -math.inf:
        return 0
    raw = round(dbm_to_mw(dbm) / POWER_LSB_MW)
    return min(max(raw, 1), _U16_MAX)


def temp_raw(celsius: float) -> int:
    return min(max(round(celsius * 256.0), -0x8000), 0x7FFF)


def vcc_raw(volts: float) -> int:
    return min(max(round(volts / VCC_LSB_V), 0), _U16_MAX)


def bias_raw(milliamps: float, multiplier: int = 1) -> int:
    return min(max(round(milliamps / (BIAS_LSB_MA * multiplier)), 0), _U16_MAX)


def checksum(data: bytes | bytearray, start: int, end: int) -> int:
    """Low 8 bits of the sum of data[start:end] (end exclusive)."""
    return sum(data[start:end]) & 0xFF
