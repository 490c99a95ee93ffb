"""The data every source hands to the rule layer: one columnar batch per device poll.

A batch is long-form: one row per (optic, lane, quantity). Values are already in the
units the rules work in (dBm for optical power, mA for bias, degrees C, volts), so no
layer after the collector converts units. Rows carry a status instead of sentinel
numbers: a dark receiver is ``NO_LIGHT`` with ``value`` NaN, never -inf or -40.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, field
from enum import IntEnum, StrEnum

import numpy as np

from lightwarden.collector.units import mw_to_dbm


class Quantity(IntEnum):
    """What a reading measures. The integer codes are stable: arrays store them."""

    RX_POWER = 0  # dBm
    TX_POWER = 1  # dBm
    BIAS = 2  # mA
    TEMPERATURE = 3  # degrees C
    SUPPLY = 4  # V

    @property
    def unit(self) -> str:
        return _UNITS[self]

    @property
    def label(self) -> str:
        """Short name used in metrics labels, JSON and pages."""
        return _LABELS[self]

    @classmethod
    def from_label(cls, label: object) -> Quantity:
        """The quantity called ``label`` (as written by ``label``); ValueError otherwise."""
        found = _BY_LABEL.get(label) if isinstance(label, str) else None
        if found is None:
            raise ValueError(f"quantity {label!r} is not one of {sorted(_BY_LABEL)}")
        return found


_UNITS = {
    Quantity.RX_POWER: "dBm",
    Quantity.TX_POWER: "dBm",
    Quantity.BIAS: "mA",
    Quantity.TEMPERATURE: "C",
    Quantity.SUPPLY: "V",
}
_LABELS = {
    Quantity.RX_POWER: "rx_power",
    Quantity.TX_POWER: "tx_power",
    Quantity.BIAS: "bias",
    Quantity.TEMPERATURE: "temperature",
    Quantity.SUPPLY: "supply",
}
_BY_LABEL = {label: q for q, label in _LABELS.items()}

#: Quantities measured per lane; the others are per module (stored with lane 0).
LANE_QUANTITIES = (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS)

#: Highest lane number a module can have: CMIS allows up to 4 banks of 8 lanes (from
#: memory); SFF-8636 has 4, SFF-8472 one. Lanes are stored as int16.
MAX_LANE = 32
#: the lane stored for a row whose reported lane was out of range (status INVALID)
BAD_LANE = -1


def is_ascii_number(text: str) -> bool:
    """Only ASCII 0-9: ``str.isdigit`` also accepts superscripts and other scripts'
    digits, some of which ``int`` then refuses."""
    return text.isascii() and text.isdigit()
MODULE_QUANTITIES = (Quantity.TEMPERATURE, Quantity.SUPPLY)


class ReadingStatus(IntEnum):
    """Whether a row holds a usable value, and if not, why."""

    OK = 0
    NO_LIGHT = 1  # optical power reading of zero: no dBm value exists
    UNAVAILABLE = 2  # sensor present but not reporting (e.g. RFC 3433 operStatus != ok)
    UNSUPPORTED = 3  # the module or platform does not measure this
    INVALID = 4  # the device sent something that is not a number we can trust


@dataclass(slots=True, frozen=True)
class Thresholds:
    """Alarm/warning thresholds a module declares for one quantity, in reading units.

    Any edge may be None when the module does not declare it.
    """

    high_alarm: float | None = None
    low_alarm: float | None = None
    high_warning: float | None = None
    low_warning: float | None = None


@dataclass(slots=True)
class OpticIdentity:
    """What we know about the module plugged into one port."""

    device: str
    port: str  # interface name as the device reports it (ifName)
    if_index: int | None = None
    alias: str = ""  # ifAlias / description: usually the far end or circuit id
    form_factor: str = ""  # "SFP", "QSFP28", "QSFP-DD", ...
    pmd: str = ""  # IEEE 802.3 PMD name, e.g. "10GBASE-LR"; "" when unknown
    pmd_source: str = ""  # where the PMD name came from: "eeprom", "entity", "config", ...
    wavelength_nm: float | None = None
    lanes: int = 1
    part_number: str = ""
    serial: str = ""
    rx_power_type: str = "average"  # "average" or "oma" (SFF-8472 A0h byte 92 bit 3)
    oper_up: bool | None = None  # IF-MIB ifOperStatus == up(1); None when unknown
    admin_up: bool | None = None
    #: Module-declared thresholds per quantity (from the memory map or CLI output).
    thresholds: dict[Quantity, Thresholds] = field(default_factory=dict)
    #: What the device reports about this optic that cannot be right (two sensors for
    #: one lane, say): shown on the page, in ``check`` and counted in the health metric.
    problems: list[str] = field(default_factory=list)
    #: Status flags the module has set, as (name, lane): "tx_fault", "rx_los",
    #: "rx_power_high_alarm", ... (lane 0 for module-wide flags), from its memory map.
    flags: frozenset[tuple[str, int]] = frozenset()
    module_state: str = ""  # CMIS module state ("ready", "low_power", "fault", ...); "" unknown
    #: the neighbour LLDP reports on this port: (system name, port name) as advertised
    lldp_far: tuple[str, str] | None = None

    @property
    def key(self) -> tuple[str, str]:
        return (self.device, self.port)


@dataclass(slots=True)
class ReadingBatch:
    """All readings from one poll of one device, column by column.

    ``optic`` indexes into ``optics``; ``lane`` is 1-based for per-lane quantities and
    0 for module-wide ones (temperature, supply). ``notes`` maps a row number to a
    human-readable reason for a non-OK status.
    """

    device: str
    taken_at: float  # epoch seconds, passed in by the caller (sources do not read clocks)
    optics: list[OpticIdentity]
    optic: np.ndarray  # int32
    lane: np.ndarray  # int16
    quantity: np.ndarray  # int8 (Quantity)
    value: np.ndarray  # float64, NaN unless status == OK
    status: np.ndarray  # int8 (ReadingStatus)
    notes: dict[int, str] = field(default_factory=dict)

    def __len__(self) -> int:
        return int(self.value.shape[0])

    def rows(  # pragma: no cover - convenience for humans and tests
        self,
    ) -> Iterator[tuple[OpticIdentity, int, Quantity, float, ReadingStatus, str]]:
        for i in range(len(self)):
            yield (
                self.optics[int(self.optic[i])],
                int(self.lane[i]),
                Quantity(int(self.quantity[i])),
                float(self.value[i]),
                ReadingStatus(int(self.status[i])),
                self.notes.get(i, ""),
            )


class BatchBuilder:
    """Accumulates rows in Python lists and freezes them into a ReadingBatch once."""

    __slots__ = ("_lane", "_notes", "_optic", "_quantity", "_status", "_value", "device", "optics")

    def __init__(self, device: str) -> None:
        self.device = device
        self.optics: list[OpticIdentity] = []
        self._optic: list[int] = []
        self._lane: list[int] = []
        self._quantity: list[int] = []
        self._value: list[float] = []
        self._status: list[int] = []
        self._notes: dict[int, str] = {}

    def add_optic(self, optic: OpticIdentity) -> int:
        self.optics.append(optic)
        return len(self.optics) - 1

    def add(
        self,
        optic: int,
        lane: int,
        quantity: Quantity,
        value: float | None,
        status: ReadingStatus = ReadingStatus.OK,
        note: str = "",
    ) -> None:
        if status is ReadingStatus.OK and (value is None or not math.isfinite(value)):
            status = ReadingStatus.INVALID
            note = note or "value is not a finite number"
        if not 0 <= lane <= MAX_LANE:
            # One impossible lane number must cost its row, never the device's poll
            # (it would overflow the int16 lane column).
            note = f"lane {lane} out of range (0..{MAX_LANE})"
            lane, status = BAD_LANE, ReadingStatus.INVALID
        if note:
            self._notes[len(self._value)] = note
        self._optic.append(optic)
        self._lane.append(lane)
        self._quantity.append(int(quantity))
        self._value.append(
            float(value) if status is ReadingStatus.OK and value is not None else math.nan)
        self._status.append(int(status))

    def add_power_mw(self, optic: int, lane: int, quantity: Quantity, milliwatts: float) -> None:
        """Add an optical power given in mW; zero (or less) becomes NO_LIGHT."""
        if not math.isfinite(milliwatts):
            self.add(optic, lane, quantity, None, ReadingStatus.INVALID, "power is not a number")
        elif milliwatts <= 0.0:
            self.add(optic, lane, quantity, None, ReadingStatus.NO_LIGHT, "no light (0 mW)")
        else:
            self.add(optic, lane, quantity, mw_to_dbm(milliwatts))

    def build(self, taken_at: float) -> ReadingBatch:
        return ReadingBatch(
            device=self.device,
            taken_at=taken_at,
            optics=self.optics,
            optic=np.asarray(self._optic, dtype=np.int32),
            lane=np.asarray(self._lane, dtype=np.int16),
            quantity=np.asarray(self._quantity, dtype=np.int8),
            value=np.asarray(self._value, dtype=np.float64),
            status=np.asarray(self._status, dtype=np.int8),
            notes=self._notes,
        )


class PollErrorKind(StrEnum):
    """Why a poll failed, in one word; the words are stable (metrics labels, JSON, logs).

    A StrEnum, so a kind is its word wherever it is written out.
    """

    NONE = ""  # the poll worked (falsy, like the empty word it stands for)
    TIMEOUT = "timeout"  # no answer in time
    AUTH = "auth"  # credentials or security parameters refused
    HOSTKEY = "hostkey"  # SSH host key unknown or changed
    REFUSED = "refused"  # the device refused the connection
    DROPPED = "dropped"  # a session closed under us
    TRANSPORT = "transport"  # could not send at all (socket, name resolution)
    PROTOCOL = "protocol"  # an answer that breaks the protocol, or cannot be decoded
    PARSE = "parse"  # CLI output that does not match the platform's template
    UNSUPPORTED = "unsupported"  # the platform cannot do what was asked (e.g. memory maps)
    CONFIG = "config"  # unusable local settings (missing key or known_hosts file)
    INTERNAL = "internal"  # a bug of ours, caught so the poll loop goes on


#: device health words, best first (PollOutcome.health)
HEALTH_WORDS = ("up", "partial", "down")


@dataclass(slots=True)
class PollOutcome:
    """How one poll of one device went: the batch when it worked, the error when not."""

    device: str
    started_at: float
    duration_s: float
    batch: ReadingBatch | None = None
    error: str = ""  # short, secret-free, names what failed ("timed out after 3 tries")
    error_kind: PollErrorKind = PollErrorKind.NONE

    @property
    def ok(self) -> bool:
        return self.batch is not None and not self.error

    @property
    def health(self) -> str:
        """``up`` (every row read), ``partial`` (rows read, some lost: the error says
        which), or ``down`` (nothing read). The one word page, JSON and metrics use."""
        if self.batch is None:
            return "down"
        return "partial" if self.error else "up"

    @property
    def reason(self) -> str:
        """Why the device is not ``up`` ("" when it is)."""
        return self.error
