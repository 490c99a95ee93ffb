"""What a module's memory map adds to an optic's identity, and how far each part is trusted.

Sources (SNMP, SSH) read a module's map once per module (per serial) and keep the
:class:`MapFacts` made here; every poll then applies them to the optic's identity: the
module-declared thresholds (which the window resolver ranks above the PMD table), the
Rx power type (average or OMA) and, where the device said nothing, PMD, form factor,
wavelength and lane count.

Trust follows the check bytes, each of which covers one region of the map:

============  ==========================  ===================  ======================
layout        identity (PMD, part, ...)   Rx power type        thresholds
============  ==========================  ===================  ======================
SFF-8472      CC_BASE (+ CC_EXT serial)   CC_EXT (byte 92)     CC_DMI (A2h 0-94)
SFF-8636      CC_BASE (+ CC_EXT serial)   CC_EXT (byte 220)    none (page 03h)
CMIS          page 00h                    page 01h             page 02h
============  ==========================  ===================  ======================

A wrong check byte makes only what it covers unusable: with a bad CC_BASE the identity
fields are suspect (the device's own inventory is kept) but thresholds under a good
CC_DMI are used; with a bad CC_DMI the thresholds are dropped (the PMD table or the
CLI's thresholds judge instead), since one flipped bit in a threshold moves an alarm
edge silently. Either way the optic's Rx rows carry a note naming the check byte.
Offsets and coverage: standards.md SFF-8472 rows (verified); SFF-8636 and CMIS check
byte coverage as implemented by the decoders (collector/eeprom).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import TypeVar

from lightwarden.collector.eeprom import ModuleMap, decode
from lightwarden.collector.readings import OpticIdentity, Quantity, ReadingBatch, Thresholds

#: Check bytes covering each region, per layout (see the module docstring).
IDENTITY_CHECKS = {"SFF-8472": ("CC_BASE",), "SFF-8636": ("CC_BASE",), "CMIS": ("page 00h",)}
SERIAL_CHECKS = {"SFF-8472": ("CC_EXT",), "SFF-8636": ("CC_EXT",), "CMIS": ("page 00h",)}
RX_TYPE_CHECKS = {"SFF-8472": ("CC_EXT",), "SFF-8636": ("CC_EXT",), "CMIS": ("page 01h",)}
THRESHOLD_CHECKS = {"SFF-8472": ("CC_DMI",), "SFF-8636": (), "CMIS": ("page 02h",)}

OMA_ROW_NOTE = "module reports Rx power as OMA, not average power (memory map)"


K = TypeVar("K")

#: How long a module's decoded map is trusted before it is read again (its status flags
#: are live bits; the rest rarely changes). A map with a flag set is read every poll, so a
#: flag that clears is seen at once. Our choice: 15 minutes.
MAP_REFRESH_S = 900.0


def stale_maps(cache: Mapping[K, MapFacts], read_at: Mapping[K, float], now: float,
               keys: Iterable[K]) -> list[K]:
    """Which of ``keys`` need their map read now: never read, flagged, or older than
    ``MAP_REFRESH_S``."""
    out = []
    for key in keys:
        facts = cache.get(key)
        if facts is None or facts.flags or facts.module_state not in ("", "ready") or (
                now - read_at.get(key, -math.inf) >= MAP_REFRESH_S):
            out.append(key)
    return out


@dataclass(slots=True, frozen=True)
class MapFacts:
    """The usable part of one module's decoded map. Empty/None where not usable."""

    serial: str = ""  # "" when the serial is not trusted or absent
    part_number: str = ""
    pmd: str = ""
    form_factor: str = ""
    wavelength_nm: float | None = None
    lanes: int | None = None
    rx_power_type: str | None = None  # "average" / "oma"; None: not trusted
    calibration: str | None = None  # "internal" / "external" (for the record)
    thresholds: Mapping[Quantity, Thresholds] = field(default_factory=dict)
    #: What an operator should know, shown on the optic's Rx rows.
    notes: tuple[str, ...] = ()
    #: Status flags set when the map was read, as (name, lane), and the CMIS module state
    flags: frozenset[tuple[str, int]] = frozenset()
    module_state: str = ""

    @property
    def usable(self) -> bool:
        return bool(self.thresholds or self.rx_power_type or self.pmd)


def _bad(m: ModuleMap, names: Iterable[str]) -> list[str]:
    return [n for n in names if n in m.checksums and not m.checksums[n].ok]


def _check_words(m: ModuleMap, names: list[str]) -> str:
    parts = []
    for n in names:
        c = m.checksums[n]
        parts.append(f"{n} (expected 0x{c.expected:02X}, found 0x{c.found:02X})")
    return ", ".join(parts)


def facts_from_map(data: bytes) -> MapFacts:
    """Decode a map and keep what its check bytes vouch for. Never raises."""
    return facts_from_module_map(decode(data))


def facts_from_module_map(m: ModuleMap) -> MapFacts:
    if not m.spec:
        reason = m.problems[0] if m.problems else "layout not recognised"
        return MapFacts(notes=(f"memory map not usable: {reason}",))
    spec = m.spec
    notes: list[str] = []
    bad_identity = _bad(m, IDENTITY_CHECKS[spec])
    bad_serial = _bad(m, SERIAL_CHECKS[spec])
    bad_rx_type = _bad(m, RX_TYPE_CHECKS[spec])
    bad_thresholds = _bad(m, THRESHOLD_CHECKS[spec])
    if bad_identity:
        notes.append(
            f"memory map check byte {_check_words(m, bad_identity)} is wrong: its identity "
            "fields (PMD, part number, wavelength) are not used"
            + ("" if bad_thresholds else "; its thresholds are (their check byte is good)")
        )
    if bad_thresholds:
        notes.append(
            f"memory map check byte {_check_words(m, bad_thresholds)} is wrong: the module's "
            "thresholds are not used"
        )
    if bad_rx_type and not bad_identity:
        notes.append(
            f"memory map check byte {_check_words(m, bad_rx_type)} is wrong: the Rx power "
            "type (average/OMA) is not used"
        )
    others = [p for p in m.problems if not p.startswith("bad checksum ")]
    if others:
        notes.append("memory map: " + "; ".join(others))
    rx_type = None if bad_rx_type else m.rx_power_type
    if rx_type == "oma":
        notes.append(OMA_ROW_NOTE)
    trusted_identity = not bad_identity
    return MapFacts(
        serial=m.serial if not bad_serial else "",
        part_number=m.part_number if trusted_identity else "",
        pmd=m.pmd if trusted_identity else "",
        form_factor=m.form_factor if trusted_identity else "",
        wavelength_nm=m.wavelength_nm if trusted_identity else None,
        lanes=len(m.lanes) if trusted_identity and m.lanes else None,
        rx_power_type=rx_type,
        calibration=m.calibration,
        thresholds={} if bad_thresholds else dict(m.thresholds),
        notes=tuple(notes),
        flags=frozenset((f.name, f.lane) for f in m.flags),
        module_state=m.module_state or "",
    )


def apply_to_identity(identity: OpticIdentity, facts: MapFacts) -> tuple[str, ...]:
    """Fill ``identity`` from ``facts`` in place; returns the notes for the optic's Rx rows.

    A map whose (trusted) serial differs from the serial the device reports belongs to
    another module (swapped since it was read): nothing of it is used.
    """
    if facts.serial and identity.serial and facts.serial.strip() != identity.serial.strip():
        return (f"memory map is of module {facts.serial}, not the fitted {identity.serial}: "
                "not used until it is read again",)
    if facts.thresholds:
        # The map states thresholds at register resolution; a CLI's rounded table only
        # fills quantities the map does not declare.
        merged = dict(identity.thresholds)
        merged.update(facts.thresholds)
        identity.thresholds = merged
    if facts.rx_power_type:
        identity.rx_power_type = facts.rx_power_type
    identity.flags = facts.flags
    identity.module_state = facts.module_state
    if facts.pmd and not identity.pmd:
        identity.pmd, identity.pmd_source = facts.pmd, "eeprom"
    if facts.form_factor and not identity.form_factor:
        identity.form_factor = facts.form_factor
    if facts.wavelength_nm is not None and identity.wavelength_nm is None:
        identity.wavelength_nm = facts.wavelength_nm
    if facts.part_number and not identity.part_number:
        identity.part_number = facts.part_number
    if facts.serial and not identity.serial:
        identity.serial = facts.serial
    return facts.notes


def join_note(existing: str, extra: Iterable[str]) -> str:
    parts = [existing] if existing else []
    parts.extend(n for n in extra if n and n not in parts)
    return "; ".join(parts)


def apply_map_facts(batch: ReadingBatch, facts_by_port: Mapping[str, MapFacts]) -> None:
    """Apply cached facts to every optic of a batch (by port name) and note its Rx rows."""
    notes_by_optic: dict[int, tuple[str, ...]] = {}
    for slot, identity in enumerate(batch.optics):
        facts = facts_by_port.get(identity.port)
        if facts is not None:
            notes = apply_to_identity(identity, facts)
            if notes:
                notes_by_optic[slot] = notes
    if not notes_by_optic:
        return
    rx = int(Quantity.RX_POWER)
    for row in range(len(batch)):
        optic_notes = notes_by_optic.get(int(batch.optic[row]))
        if optic_notes and int(batch.quantity[row]) == rx:
            batch.notes[row] = join_note(batch.notes.get(row, ""), optic_notes)
