"""RFC 3433 ENTITY-SENSOR-MIB decoding and sensor naming, with no I/O.

Two jobs, both pure:

* :func:`sensor_value` turns one sensor's (type, scale, precision, value, units display,
  operStatus) into a number in reading units (dBm, mA, C, V) plus a ReadingStatus and a
  note explaining any non-OK status.
* :func:`classify_sensor` decides which Quantity and lane a sensor measures from its
  entPhysicalName and type, following the project's SNMP mapping contract.

RFC 3433 has no dBm type: optical power arrives either as watts(6) with a scale, or as
other(1) (or a private type) whose entPhySensorUnitsDisplay says "dBm".
"""

from __future__ import annotations

import re
from enum import Enum

from lightwarden.collector.readings import LANE_QUANTITIES, Quantity, ReadingStatus
from lightwarden.collector.units import watts_to_dbm

# EntitySensorDataType (RFC 3433)
OTHER = 1
UNKNOWN = 2
VOLTS_AC = 3
VOLTS_DC = 4
AMPERES = 5
WATTS = 6
HERTZ = 7
CELSIUS = 8
PERCENT_RH = 9
RPM = 10
CMM = 11
TRUTHVALUE = 12

# EntitySensorStatus (RFC 3433)
STATUS_OK = 1
_STATUS_NAMES = {1: "ok", 2: "unavailable", 3: "nonoperational"}

#: RFC 3433: +-1000000000 mean the real value is out of range (overflow / underflow).
OVERFLOW_LIMIT = 1_000_000_000

#: A dBm reading at or below this is a dark receiver (the floor agents report for 0 mW).
NO_LIGHT_DBM = -40.0


class SensorKind(Enum):
    """The physical dimension a sensor reports, once type and units display are read."""

    POWER_W = "watts"  # linear optical power, converted to dBm
    POWER_DBM = "dBm"  # already logarithmic
    CURRENT = "amperes"  # converted to mA
    TEMPERATURE = "celsius"
    VOLTAGE = "voltsDC"


_TYPE_KINDS = {
    WATTS: SensorKind.POWER_W,
    AMPERES: SensorKind.CURRENT,
    CELSIUS: SensorKind.TEMPERATURE,
    VOLTS_DC: SensorKind.VOLTAGE,
}

# Units display strings we trust for types outside the RFC list (or other/unknown).
# Keys are lower-cased with spaces removed.
_DISPLAY_KINDS = {
    "dbm": SensorKind.POWER_DBM,
    "w": SensorKind.POWER_W,
    "watts": SensorKind.POWER_W,
    "a": SensorKind.CURRENT,
    "amperes": SensorKind.CURRENT,
    "amps": SensorKind.CURRENT,
    "c": SensorKind.TEMPERATURE,
    "celsius": SensorKind.TEMPERATURE,
    "degc": SensorKind.TEMPERATURE,
    "°c": SensorKind.TEMPERATURE,
    "v": SensorKind.VOLTAGE,
    "vdc": SensorKind.VOLTAGE,
    "volts": SensorKind.VOLTAGE,
    "voltsdc": SensorKind.VOLTAGE,
}

#: Which quantities a sensor kind may feed.
KIND_QUANTITIES: dict[SensorKind, tuple[Quantity, ...]] = {
    SensorKind.POWER_W: (Quantity.RX_POWER, Quantity.TX_POWER),
    SensorKind.POWER_DBM: (Quantity.RX_POWER, Quantity.TX_POWER),
    SensorKind.CURRENT: (Quantity.BIAS,),
    SensorKind.TEMPERATURE: (Quantity.TEMPERATURE,),
    SensorKind.VOLTAGE: (Quantity.SUPPLY,),
}


def scale_exponent(scale: int) -> int:
    """Power of ten for an EntitySensorDataScale code: yocto(1) -24, units(9) 0, yotta(17) 24."""
    if not 1 <= scale <= 17:
        raise ValueError(f"scale code {scale} is outside 1..17")
    return (scale - 9) * 3


def sensor_kind(sensor_type: int, units_display: str = "") -> SensorKind | None:
    """What a sensor measures: by RFC type first, else by its units display, else None."""
    kind = _TYPE_KINDS.get(sensor_type)
    if kind is not None:
        return kind
    return _DISPLAY_KINDS.get(units_display.strip().replace(" ", "").lower())


def _short(value: object) -> str:
    text = value.decode("utf-8", "replace") if isinstance(value, bytes) else str(value)
    return text if len(text) <= 24 else text[:21] + "..."


def _as_int(value: object) -> int | None:
    # bool is an int subclass but never a sensor reading.
    if isinstance(value, int) and not isinstance(value, bool):
        return int(value)
    return None


def sensor_value(
    sensor_type: object,
    scale: object,
    precision: object,
    value: object,
    units_display: str = "",
    oper_status: object = STATUS_OK,
) -> tuple[float | None, ReadingStatus, str]:
    """Convert one RFC 3433 sensor reading to reading units.

    Returns ``(value, status, note)``: value is None unless status is OK. Power is in dBm
    (watts with value 0 and dBm at or below -40 are NO_LIGHT), current in mA,
    temperature in C, voltage in V. Columns that are not integers (an agent sending text
    where an Integer belongs) give INVALID with a note naming the column.
    """
    status = _as_int(oper_status)
    if status is None:
        note = f"sensor status is not an integer: {_short(oper_status)!r}"
        return None, ReadingStatus.INVALID, note
    if status != STATUS_OK:
        name = _STATUS_NAMES.get(status, f"status {status}")
        return None, ReadingStatus.UNAVAILABLE, f"sensor reports {name}"

    ints: dict[str, int] = {}
    for column, raw in (("type", sensor_type), ("scale", scale), ("precision", precision)):
        number = _as_int(raw)
        if number is None:
            note = f"sensor {column} is not an integer: {_short(raw)!r}"
            return None, ReadingStatus.INVALID, note
        ints[column] = number
    raw_value = _as_int(value)
    if raw_value is None:
        return None, ReadingStatus.INVALID, f"sensor value is not an integer: {_short(value)!r}"
    if raw_value >= OVERFLOW_LIMIT:
        return None, ReadingStatus.INVALID, "sensor value overflow (>= +1e9)"
    if raw_value <= -OVERFLOW_LIMIT:
        return None, ReadingStatus.INVALID, "sensor value underflow (<= -1e9)"

    kind = sensor_kind(ints["type"], units_display or "")
    if kind is None:
        shown = f" with units {units_display!r}" if units_display else ""
        return None, ReadingStatus.UNSUPPORTED, f"sensor type {ints['type']}{shown} is not handled"
    try:
        exponent = scale_exponent(ints["scale"])
    except ValueError as exc:
        return None, ReadingStatus.INVALID, f"sensor {exc}"
    # Precision 1..9 are decimal places; -8..0 mean "not fixed point" (RFC 3433).
    places = ints["precision"] if ints["precision"] > 0 else 0
    physical = raw_value * 10.0 ** (exponent - places)

    if kind is SensorKind.POWER_W:
        if physical < 0:
            return None, ReadingStatus.INVALID, f"negative optical power ({physical:g} W)"
        if physical == 0:
            return None, ReadingStatus.NO_LIGHT, "no light (0 W)"
        return watts_to_dbm(physical), ReadingStatus.OK, ""
    if kind is SensorKind.POWER_DBM:
        if physical <= NO_LIGHT_DBM:
            return None, ReadingStatus.NO_LIGHT, f"no light ({physical:.2f} dBm at or below floor)"
        return physical, ReadingStatus.OK, ""
    if kind is SensorKind.CURRENT:
        return physical * 1000.0, ReadingStatus.OK, ""
    return physical, ReadingStatus.OK, ""


# --- names -------------------------------------------------------------------------

_WORDS = (
    # Order matters: "Tx Bias" is bias, not transmit power.
    (Quantity.BIAS, re.compile(r"\bbias\b", re.IGNORECASE)),
    (Quantity.TEMPERATURE, re.compile(r"\btemp(erature)?\b", re.IGNORECASE)),
    (Quantity.SUPPLY, re.compile(r"\b(voltage|vcc|supply)\b", re.IGNORECASE)),
    (Quantity.RX_POWER, re.compile(r"\b(rx|receive[rd]?)\b", re.IGNORECASE)),
    (Quantity.TX_POWER, re.compile(r"\b(tx|transmit(ter|ted)?)\b", re.IGNORECASE)),
)
_LANE = re.compile(r"\blane\s*([0-9]+)\b", re.IGNORECASE | re.ASCII)
_TOTAL = re.compile(r"\b(total|aggregate|sum)\b", re.IGNORECASE)

#: The lane ``classify_sensor`` gives a sensor that measures all lanes together (a total
#: optical power); the inventory stores such a reading at lane 0 of its quantity.
LANE_TOTAL = -1
_TYPE_QUANTITY = {CELSIUS: Quantity.TEMPERATURE, VOLTS_DC: Quantity.SUPPLY, AMPERES: Quantity.BIAS}


def classify_sensor(
    name: str, sensor_type: int = OTHER, units_display: str = "", port_name: str = ""
) -> tuple[Quantity, int] | None:
    """Which (Quantity, lane) a sensor entity measures, or None when it is not an optic sensor.

    The type alone decides temperature, supply and bias; otherwise words in the name do
    (case-insensitive). ``port_name`` is stripped from the front of the name first so a
    port called e.g. "rx-uplink" cannot be mistaken for a word. The lane is the number
    the name gives, as given (devices number from 0 or from 1: the inventory maps them
    to 1..N per optic); an unnumbered lane quantity is lane 1, a total over all lanes
    ("Rx Power Total") is ``LANE_TOTAL``, module quantities are lane 0.
    """
    text = name.strip()
    if port_name and text.lower().startswith(port_name.lower()):
        text = text[len(port_name):]
    quantity = _TYPE_QUANTITY.get(sensor_type)
    if quantity is None:
        for candidate, pattern in _WORDS:
            if pattern.search(text):
                quantity = candidate
                break
    if quantity is None:
        return None
    kind = sensor_kind(sensor_type, units_display)
    if kind is not None and quantity not in KIND_QUANTITIES[kind]:
        return None
    if quantity not in LANE_QUANTITIES:
        return quantity, 0
    match = _LANE.search(text)
    if match:
        return quantity, int(match.group(1))
    if quantity is not Quantity.BIAS and _TOTAL.search(text):
        return quantity, LANE_TOTAL
    return quantity, 1
