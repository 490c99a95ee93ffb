"""What a decoded memory map holds, in reading units (dBm, mA, C, V).

Every field a map may lack is None (or empty); ``problems`` names what was wrong with
the bytes. Decoders fill these objects and never raise.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from lightwarden.collector.readings import Quantity, Thresholds

#: Order of the four threshold/flag edges as every layout stores them.
EDGES = ("high_alarm", "low_alarm", "high_warning", "low_warning")


@dataclass(slots=True)
class LaneMonitor:
    """Real-time values of one lane (1-based). None means not measured or no light."""

    lane: int
    rx_power_dbm: float | None = None
    tx_power_dbm: float | None = None
    bias_ma: float | None = None
    rx_no_light: bool = False  # Rx power register read zero: a dark receiver
    tx_no_light: bool = False  # Tx power register read zero: laser off or dead


@dataclass(slots=True, frozen=True)
class Flag:
    """One latched or live status bit that is set, e.g. ("rx_power_low_alarm", 2).

    ``lane`` is 0 for module-wide flags (temperature, supply).
    """

    name: str
    lane: int = 0


@dataclass(slots=True, frozen=True)
class Checksum:
    """One check byte: ``expected`` is what the covered bytes sum to, ``found`` is stored."""

    ok: bool
    expected: int
    found: int


@dataclass(slots=True)
class ModuleMap:
    """A decoded module memory map. Built by ``lightwarden.collector.eeprom.decode``."""

    spec: str = ""  # "SFF-8472", "SFF-8636", "CMIS" or "" when not recognised
    identifier: int | None = None  # SFF-8024 byte 0
    identifier_name: str = ""
    form_factor: str = ""
    pmd: str = ""  # IEEE 802.3 PMD name from the compliance codes; "" when unknown
    media_type: str = ""  # CMIS media type ("smf", "mmf", ...); "" elsewhere
    nominal_rate_mbd: int | None = None
    wavelength_nm: float | None = None
    link_lengths_m: dict[str, int] = field(default_factory=dict)  # "smf", "om3", ...
    vendor_name: str = ""
    part_number: str = ""
    serial: str = ""
    vendor_rev: str = ""
    diagnostics: bool = False  # the module implements digital diagnostics
    rx_power_type: str | None = None  # "average" or "oma"
    calibration: str | None = None  # "internal" or "external"
    temperature_c: float | None = None
    supply_v: float | None = None
    lanes: list[LaneMonitor] = field(default_factory=list)
    #: Module-declared thresholds for the quantities the map declares.
    thresholds: dict[Quantity, Thresholds] = field(default_factory=dict)
    flags: list[Flag] = field(default_factory=list)
    checksums: dict[str, Checksum] = field(default_factory=dict)
    module_state: str | None = None  # CMIS only: "ready", "low_power", "fault", ...
    problems: list[str] = field(default_factory=list)

    @property
    def clean(self) -> bool:
        return not self.problems

    def flag_set(self, name: str, lane: int = 0) -> bool:
        return Flag(name, lane) in self.flags
