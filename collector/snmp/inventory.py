"""What a device has: transceivers and their sensors, built from walked MIB tables.

Pure: takes the tables as ``{column OID: {index: value}}`` (as SnmpSession.walk_columns
returns them) and follows the SNMP mapping contract: chassis -> port entity (aliased to
an ifIndex) -> transceiver entity (class module, contained in the port) -> sensor
entities (class sensor, contained in the transceiver).
"""

from __future__ import annotations

import logging
import re
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field

from lightwarden.collector.readings import LANE_QUANTITIES, OpticIdentity, Quantity
from lightwarden.collector.sensors import LANE_TOTAL, OTHER, classify_sensor

log = logging.getLogger(__name__)

Oid = tuple[int, ...]
Table = Mapping[str, Mapping[Oid, object]]

SYS_UPTIME = "1.3.6.1.2.1.1.3.0"
ENT_LAST_CHANGE = "1.3.6.1.2.1.47.1.4.1.0"

IF_DESCR = "1.3.6.1.2.1.2.2.1.2"
IF_ADMIN = "1.3.6.1.2.1.2.2.1.7"
IF_OPER = "1.3.6.1.2.1.2.2.1.8"
IF_NAME = "1.3.6.1.2.1.31.1.1.1.1"
IF_ALIAS = "1.3.6.1.2.1.31.1.1.1.18"
IF_COLUMNS = (IF_NAME, IF_ALIAS, IF_DESCR, IF_ADMIN, IF_OPER)
IF_STATUS_COLUMNS = (IF_ADMIN, IF_OPER)
IF_INDEX_PREFIX = "1.3.6.1.2.1.2.2.1.1."

_ENT = "1.3.6.1.2.1.47.1.1.1.1"
ENT_DESCR = _ENT + ".2"
ENT_CONTAINED_IN = _ENT + ".4"
ENT_CLASS = _ENT + ".5"
ENT_NAME = _ENT + ".7"
ENT_SERIAL = _ENT + ".11"
ENT_MFG = _ENT + ".12"
ENT_MODEL = _ENT + ".13"
ENT_ALIAS = "1.3.6.1.2.1.47.1.3.2.1.2"
ENT_COLUMNS = (
    ENT_DESCR, ENT_CONTAINED_IN, ENT_CLASS, ENT_NAME, ENT_SERIAL, ENT_MFG, ENT_MODEL, ENT_ALIAS,
)  # fmt: skip

#: Read first at discovery: enough to find which entities are ports, modules and sensors.
ENT_TREE_COLUMNS = (ENT_CLASS, ENT_CONTAINED_IN, ENT_ALIAS)
#: Then only these rows: a module's descriptive columns, a port's or sensor's name.
ENT_MODULE_ROW = (ENT_DESCR, ENT_NAME, ENT_SERIAL, ENT_MODEL)
ENT_NAME_ROW = (ENT_NAME,)

_SENSOR = "1.3.6.1.2.1.99.1.1.1"
SENSOR_TYPE = _SENSOR + ".1"
SENSOR_SCALE = _SENSOR + ".2"
SENSOR_PRECISION = _SENSOR + ".3"
SENSOR_VALUE = _SENSOR + ".4"
SENSOR_STATUS = _SENSOR + ".5"
SENSOR_UNITS = _SENSOR + ".6"
SENSOR_STATIC_COLUMNS = (SENSOR_TYPE, SENSOR_SCALE, SENSOR_PRECISION, SENSOR_UNITS)
SENSOR_LIVE_COLUMNS = (SENSOR_VALUE, SENSOR_STATUS)

# entPhysicalClass (ENTITY-MIB)
CLASS_SENSOR = 8
CLASS_MODULE = 9
CLASS_PORT = 10

#: How far up the containment tree a sensor may sit below its transceiver.
_MAX_DEPTH = 4

# A PMD-shaped token, used only when no known PMD name is found.
_PMD_SHAPE = re.compile(r"(?<![A-Za-z0-9])\d+(?:\.\d+)?[GMT]?BASE-[A-Z0-9]+(?![A-Za-z0-9])", re.I)

PmdNames = Iterable[str] | Callable[[], Iterable[str]]


@dataclass(slots=True)
class SensorSpec:
    """A sensor's static columns, read at discovery."""

    ent_index: int
    quantity: Quantity
    lane: int
    sensor_type: object
    scale: object
    precision: object
    units_display: str


@dataclass(slots=True)
class OpticSpec:
    identity: OpticIdentity  # oper/admin state refreshed every poll
    sensors: list[SensorSpec] = field(default_factory=list)


@dataclass(slots=True)
class Inventory:
    optics: list[OpticSpec]
    sys_uptime: int | None = None
    last_change: int | None = None

    @property
    def sensor_count(self) -> int:
        return sum(len(optic.sensors) for optic in self.optics)


def _text(value: object) -> str:
    return value.strip() if isinstance(value, str) else ""


def _int(value: object) -> int | None:
    return value if isinstance(value, int) and not isinstance(value, bool) else None


def _column(tables: Table, column: str) -> dict[int, object]:
    """A single-index column as {int index: value}."""
    return {index[0]: value for index, value in tables.get(column, {}).items() if len(index) == 1}


def resolve_pmd_names(pmd_names: PmdNames) -> list[str]:
    names = pmd_names() if callable(pmd_names) else pmd_names
    return sorted({name for name in names if name}, key=len, reverse=True)


def find_pmd(text: str, known: Iterable[str]) -> str:
    """Longest known PMD name appearing as a whole token in ``text`` (case-insensitive)."""
    best = ""
    for name in known:
        if len(name) <= len(best):
            continue
        pattern = r"(?<![A-Za-z0-9])" + re.escape(name) + r"(?![A-Za-z0-9])"
        if re.search(pattern, text, re.IGNORECASE):
            best = name
    return best


def _pmd_and_form_factor(descr: str, model: str, known: list[str]) -> tuple[str, str]:
    pmd = find_pmd(descr, known) or find_pmd(model, known)
    if not pmd:
        shaped = _PMD_SHAPE.search(descr)
        pmd = shaped.group(0).upper() if shaped else ""
    words = descr.split()
    form_factor = ""
    if words and not _PMD_SHAPE.fullmatch(words[0]) and words[0].upper() != pmd.upper():
        form_factor = words[0]
    return pmd, form_factor


def _if_index_of(alias_oid: object) -> int | None:
    if isinstance(alias_oid, str):
        text = alias_oid.lstrip(".")
        if text.startswith(IF_INDEX_PREFIX):
            rest = text[len(IF_INDEX_PREFIX):]
            if rest.isdigit():
                return int(rest)
    return None


def build_inventory(
    device: str,
    if_tables: Table,
    ent_tables: Table,
    sensor_tables: Table,
    pmd_names: PmdNames = (),
    sys_uptime: int | None = None,
    last_change: int | None = None,
) -> Inventory:
    """Find every transceiver entity in a port, its IF-MIB interface and its sensors."""
    known = resolve_pmd_names(pmd_names)
    classes = _column(ent_tables, ENT_CLASS)
    parent = _column(ent_tables, ENT_CONTAINED_IN)
    names = _column(ent_tables, ENT_NAME)
    descrs = _column(ent_tables, ENT_DESCR)
    serials = _column(ent_tables, ENT_SERIAL)
    models = _column(ent_tables, ENT_MODEL)
    if_names = _column(if_tables, IF_NAME)
    if_descrs = _column(if_tables, IF_DESCR)
    if_aliases = _column(if_tables, IF_ALIAS)
    port_if_index: dict[int, int] = {}
    for index, value in ent_tables.get(ENT_ALIAS, {}).items():
        if_index = _if_index_of(value)
        # index is (entPhysicalIndex, entAliasLogicalIndexOrZero); prefer logical 0.
        if if_index is not None and index and (index[0] not in port_if_index or index[-1] == 0):
            port_if_index[index[0]] = if_index

    optics: dict[int, OpticSpec] = {}
    for ent_index, ent_class in sorted(classes.items()):
        port_entity = _int(parent.get(ent_index))
        if ent_class != CLASS_MODULE or port_entity is None:
            continue
        if classes.get(port_entity) != CLASS_PORT:
            continue  # a line card or other module, not a pluggable in a port
        if_index = port_if_index.get(port_entity)
        port = ""
        if if_index is not None:
            port = _text(if_names.get(if_index)) or _text(if_descrs.get(if_index))
        port = port or _text(names.get(port_entity)) or f"entity {port_entity}"
        descr = _text(descrs.get(ent_index))
        model = _text(models.get(ent_index))
        pmd, form_factor = _pmd_and_form_factor(descr, model, known)
        identity = OpticIdentity(
            device=device,
            port=port,
            if_index=if_index,
            alias=_text(if_aliases.get(if_index)) if if_index is not None else "",
            form_factor=form_factor,
            pmd=pmd,
            pmd_source="entity" if pmd else "",
            part_number=model,
            serial=_text(serials.get(ent_index)),
        )
        optics[ent_index] = OpticSpec(identity)

    types = _column(sensor_tables, SENSOR_TYPE)
    scales = _column(sensor_tables, SENSOR_SCALE)
    precisions = _column(sensor_tables, SENSOR_PRECISION)
    units = _column(sensor_tables, SENSOR_UNITS)
    for ent_index, sensor_type in sorted(types.items()):
        owner = _owning_optic(ent_index, parent, optics)
        if owner is None:
            continue  # fans, PSU and chassis sensors
        spec = optics[owner]
        units_display = _text(units.get(ent_index))
        type_code = _int(sensor_type)
        found = classify_sensor(
            _text(names.get(ent_index)),
            type_code if type_code is not None else OTHER,
            units_display,
            port_name=spec.identity.port,
        )
        if found is None:
            log.debug("%s: sensor entity %d (%r) not an optic reading", device, ent_index,
                      names.get(ent_index))  # fmt: skip
            continue
        quantity, lane = found
        spec.sensors.append(
            SensorSpec(
                ent_index=ent_index,
                quantity=quantity,
                lane=lane,
                sensor_type=sensor_type,
                scale=scales.get(ent_index),
                precision=precisions.get(ent_index),
                units_display=units_display,
            )
        )
    for spec in optics.values():
        _number_lanes(spec)
    return Inventory(list(optics.values()), sys_uptime=sys_uptime, last_change=last_change)


@dataclass(slots=True, frozen=True)
class RowsToRead:
    """Which entity rows discovery reads after the containment tree (see rows_to_read)."""

    modules: tuple[int, ...]  # transceivers in a port: ENT_MODULE_ROW
    named: tuple[int, ...]  # their ports and the sensors below them: ENT_NAME_ROW
    sensors: tuple[int, ...]  # sensors below a transceiver: SENSOR_STATIC_COLUMNS


def rows_to_read(tree: Table) -> RowsToRead:
    """From entPhysicalClass and entPhysicalContainedIn, the rows worth reading.

    A switch's entity table also holds chassis, fans, power supplies, line cards and
    their sensors; only transceivers in ports, their ports and the sensors below them
    (up to the same depth :func:`build_inventory` follows) matter to us.
    """
    classes = _column(tree, ENT_CLASS)
    parent = _column(tree, ENT_CONTAINED_IN)
    modules: dict[int, OpticSpec] = {}
    ports: list[int] = []
    for ent_index, ent_class in sorted(classes.items()):
        port_entity = _int(parent.get(ent_index))
        if ent_class == CLASS_MODULE and port_entity is not None and (
                classes.get(port_entity) == CLASS_PORT):  # fmt: skip
            modules[ent_index] = OpticSpec(OpticIdentity(device="", port=""))
            ports.append(port_entity)
    sensors = tuple(
        ent_index for ent_index, ent_class in sorted(classes.items())
        if ent_class == CLASS_SENSOR and _owning_optic(ent_index, parent, modules) is not None
    )  # fmt: skip
    return RowsToRead(tuple(modules), tuple(sorted(set(ports))) + sensors, sensors)


def lane_map(raw: list[int]) -> dict[int, int]:
    """Map the lane numbers one optic's sensors give to 1..N.

    Devices number lanes from 0 or from 1 (and a breakout may give 5..8): a contiguous
    block from any base becomes 1..N; numbers from 1 with gaps stay as they are (a
    missing sensor must not shift the lanes after it).
    """
    found = sorted(set(raw))
    if not found:
        return {}
    base = found[0]
    contiguous = found[-1] - base + 1 == len(found)
    shift = 1 - base if base == 0 or (base > 1 and contiguous) else 0
    return {n: n + shift for n in found}


def _number_lanes(spec: OpticSpec) -> None:
    """Lanes to 1..N, totals to lane 0, and a duplicate lane made a visible problem."""
    raw = [s.lane for s in spec.sensors if s.quantity in LANE_QUANTITIES and s.lane >= 0]
    mapping = lane_map(raw)
    kept: list[SensorSpec] = []
    seen: dict[tuple[Quantity, int], SensorSpec] = {}
    for s in sorted(spec.sensors, key=lambda s: s.ent_index):
        if s.quantity in LANE_QUANTITIES:
            s.lane = 0 if s.lane == LANE_TOTAL else mapping.get(s.lane, s.lane)
        first = seen.get((s.quantity, s.lane))
        if first is not None:
            where = "all lanes" if s.lane == 0 and s.quantity in LANE_QUANTITIES else (
                f"lane {s.lane}")
            spec.identity.problems.append(
                f"{s.quantity.label} {where} reported by two sensors (entities "
                f"{first.ent_index} and {s.ent_index}); only the first is read")
            continue
        seen[(s.quantity, s.lane)] = s
        kept.append(s)
    kept.sort(key=lambda s: (int(s.quantity), s.lane))
    spec.sensors = kept
    lanes = [s.lane for s in kept if s.quantity in LANE_QUANTITIES]
    spec.identity.lanes = max(lanes, default=1) or 1


def _owning_optic(
    ent_index: int, parent: dict[int, object], optics: dict[int, OpticSpec]
) -> int | None:
    current: object = ent_index
    for _ in range(_MAX_DEPTH):
        current = parent.get(current) if isinstance(current, int) else None
        if not isinstance(current, int) or current == 0:
            return None
        if current in optics:
            return current
    return None
