"""An SNMP device as a poll source: discovery cached, only live columns each poll."""

from __future__ import annotations

import dataclasses
import logging
import time

from lightwarden.collector.map_facts import (
    MapFacts,
    apply_to_identity,
    facts_from_map,
    join_note,
    stale_maps,
)
from lightwarden.collector.readings import (
    BatchBuilder,
    PollErrorKind,
    PollOutcome,
    Quantity,
    ReadingBatch,
    ReadingStatus,
)
from lightwarden.collector.sensors import sensor_value
from lightwarden.collector.snmp import lldp
from lightwarden.collector.snmp.capture import CaptureSession
from lightwarden.collector.snmp.credentials import SnmpCredentials
from lightwarden.collector.snmp.fast import FastSession, SocketPool
from lightwarden.collector.snmp.inventory import (
    CLASS_SENSOR,
    ENT_CLASS,
    ENT_LAST_CHANGE,
    ENT_MODULE_ROW,
    ENT_NAME_ROW,
    ENT_TREE_COLUMNS,
    IF_ADMIN,
    IF_COLUMNS,
    IF_OPER,
    IF_STATUS_COLUMNS,
    SENSOR_LIVE_COLUMNS,
    SENSOR_STATIC_COLUMNS,
    SENSOR_STATUS,
    SENSOR_VALUE,
    SYS_UPTIME,
    Inventory,
    PmdNames,
    build_inventory,
    rows_to_read,
)
from lightwarden.collector.snmp.session import (
    EnginePool,
    Oid,
    SnmpError,
    SnmpSession,
    parse_oid,
)

log = logging.getLogger(__name__)

IF_UP = 1  # IF-MIB ifAdminStatus/ifOperStatus up(1)
#: Memory maps fetched per GET when only a few modules are new (a map is up to 896 bytes).
MAP_GET_CHUNK = 4
#: Instances per GET when discovery reads chosen entity and sensor rows.
ROW_GET_CHUNK = 40
#: Rows are read by GET when fewer than 1/GET_FRACTION of the table, else walked.
GET_FRACTION = 3


def _up(value: object) -> bool | None:
    if isinstance(value, int) and not isinstance(value, bool):
        return value == IF_UP
    return None


#: TimeTicks is an unsigned 32-bit count of hundredths of a second (RFC 2578 section 7.1.8),
#: so sysUpTime wraps to 0 after about 497 days without the agent restarting.
TICKS_WRAP = 2**32


def agent_restarted(previous: int | None, current: int | None, elapsed_s: float) -> bool:
    """Whether sysUpTime went back other than by its 2^32 wrap.

    A wrap moves the counter forward (mod 2^32) by about the time that passed; a restart
    moves it anywhere else. One minute of slack plus half the elapsed time again covers
    agents whose clock runs unevenly.
    """
    if previous is None or current is None or current >= previous:
        return False
    forward = (current - previous) % TICKS_WRAP
    return forward > elapsed_s * 150 + 6000


def _ticks(value: object) -> int | None:
    return value if isinstance(value, int) and not isinstance(value, bool) else None


class SnmpSource:
    """Polls one device's optics over SNMP (IF-MIB, ENTITY-MIB, ENTITY-SENSOR-MIB).

    Discovery (interfaces, the entity tree, sensor type/scale/precision/units) is cached;
    a poll reads sysUpTime and entLastChangeTime, re-discovers when the agent restarted
    (sysUpTime went back other than by its 2^32 wrap) or the entity tree changed, then
    walks only sensor value/status and ifAdminStatus/ifOperStatus.

    A failed poll keeps the discovered layout: the next one pays only its marks GET.
    Steady v2c polls use our own GET/GETBULK path (``fast.py``, sockets from a shared
    :class:`SocketPool`) unless ``fast_path`` is False; discovery and v3 use pysnmp.

    Pass one shared :class:`EnginePool` for all sources on an event loop; without one
    the source makes its own (close it with :meth:`close`).

    ``eeprom_oid`` names a column (indexed by ifIndex) holding each module's memory map
    as an OCTET STRING in our binary layout (e.g. the lab's ``1.3.6.1.4.1.32473.7.1.1``).
    Maps are read at discovery only, and only for modules (ifIndex, serial) not read
    before: thresholds and identity do not change while a module stays in its port, and
    a swapped module changes the entity tree, which triggers a rediscovery. A failed map
    read does not fail the poll; it is tried again on the next poll.
    """

    def __init__(
        self,
        name: str,
        host: str,
        credentials: SnmpCredentials,
        *,
        port: int = 161,
        timeout: float = 2.0,
        retries: int = 1,
        pmd_names: PmdNames = (),
        engines: EnginePool | None = None,
        max_repetitions: int = 25,
        eeprom_oid: str | None = None,
        sockets: SocketPool | None = None,
        fast_path: bool = True,
        session: CaptureSession | None = None,
    ) -> None:
        self._name = name
        self._own_engines = engines is None
        self._engines = engines if engines is not None else EnginePool()
        self._session = SnmpSession(
            self._engines.engine_for(credentials),
            credentials,
            host,
            port,
            timeout=timeout,
            retries=retries,
            max_repetitions=max_repetitions,
            limit=self._engines.limit_for(credentials),
        )
        # v2c steady polls go through our own GET/GETBULK path (fast.py); discovery,
        # memory maps and SNMPv3 stay with pysnmp.
        self._own_sockets = sockets is None
        self._sockets = sockets if sockets is not None else SocketPool()
        self._steady: SnmpSession | FastSession = self._session
        if fast_path and credentials.version == "2c":
            self._steady = FastSession(
                self._sockets, credentials, host, port,
                timeout=timeout, retries=retries, max_repetitions=max_repetitions,
            )  # fmt: skip
        if session is not None:
            # Offline: a saved walk answers every request (collector/snmp/capture.py).
            self._session = self._steady = session  # type: ignore[assignment]
        self._pmd_names = pmd_names
        self._inventory: Inventory | None = None
        self._marked_at = 0.0  # monotonic time of the sysUpTime kept in the inventory
        self.discoveries = 0  # how many times the device was (re)discovered
        self._eeprom_oid = ".".join(map(str, parse_oid(eeprom_oid))) if eeprom_oid else None
        #: (ifIndex, serial) -> facts from that module's map; kept across rediscoveries
        self._maps: dict[tuple[int, str], MapFacts] = {}
        self._maps_pending = False  # maps still to be read for the current inventory
        self._map_read_at: dict[tuple[int, str], float] = {}
        self._map_notes: dict[int, tuple[str, ...]] = {}  # ifIndex -> notes for Rx rows
        self.map_reads = 0  # memory maps fetched from the device so far

    @property
    def name(self) -> str:
        return self._name

    @property
    def inventory(self) -> Inventory | None:
        return self._inventory

    def __repr__(self) -> str:
        s = self._session
        return f"SnmpSource({self._name!r}, {s.where}, {s.credentials.describe()})"

    def forget(self) -> None:
        """Drop the cached discovery so the next poll re-reads the device's layout."""
        self._inventory = None

    @property
    def fast_path(self) -> bool:
        """Whether steady polls use our own v2c path rather than pysnmp."""
        return isinstance(self._steady, FastSession)

    @property
    def varbinds(self) -> int:
        """Varbinds received from the device so far, on both paths."""
        steady = self._steady.varbinds if self._steady is not self._session else 0
        return self._session.varbinds + steady

    def close(self) -> None:
        if self._own_engines:
            self._engines.close()
        if self._own_sockets:
            self._sockets.close()

    async def poll(self, now: float) -> PollOutcome:
        started = time.monotonic()
        try:
            batch = await self._poll(now)
        except SnmpError as exc:
            # The layout is kept: a timeout says nothing about the device's modules, and
            # the next poll's sysUpTime/entLastChangeTime tell whether to look again.
            return PollOutcome(
                device=self._name,
                started_at=now,
                duration_s=time.monotonic() - started,
                error=f"{self._name}: {exc.message}",
                error_kind=exc.kind,
            )
        except Exception as exc:
            # Bad data from an agent must not escape as a traceback; keep it in debug logs.
            self._inventory = None
            log.debug("%s: poll failed", self._name, exc_info=True)
            return PollOutcome(
                device=self._name,
                started_at=now,
                duration_s=time.monotonic() - started,
                error=f"{self._name}: could not decode the answer from {self._session.where} "
                f"({type(exc).__name__})",
                error_kind=PollErrorKind.PROTOCOL,
            )
        return PollOutcome(
            device=self._name, started_at=now, duration_s=time.monotonic() - started, batch=batch
        )

    async def _poll(self, now: float) -> ReadingBatch:
        session = self._steady
        marks = await session.get([SYS_UPTIME, ENT_LAST_CHANGE], "sysUpTime/entLastChangeTime")
        uptime, last_change = _ticks(marks[SYS_UPTIME]), _ticks(marks[ENT_LAST_CHANGE])
        inventory = self._inventory
        marked_at = time.monotonic()
        restarted = inventory is not None and agent_restarted(
            inventory.sys_uptime, uptime, marked_at - self._marked_at
        )
        if inventory is None or restarted or last_change != inventory.last_change:
            inventory = await self._discover(uptime, last_change)
        else:
            inventory.sys_uptime = uptime
        self._marked_at = marked_at
        if self._eeprom_oid is not None and (self._maps_pending or self._maps_due(now)):
            await self._read_maps(inventory, now)
        live = await session.walk_columns(
            (*SENSOR_LIVE_COLUMNS, *IF_STATUS_COLUMNS), "sensor values and interface status"
        )
        return self._build(inventory, live, now)

    async def _discover(self, uptime: int | None, last_change: int | None) -> Inventory:
        session = self._session
        if_tables = await session.walk_columns(IF_COLUMNS, "IF-MIB interface names")
        # Containment and class first, then only the rows of transceivers in ports, their
        # ports and their sensors: fans, supplies, line cards are never read in full.
        ent_tables = await session.walk_columns(ENT_TREE_COLUMNS, "ENTITY-MIB containment")
        wanted = rows_to_read(ent_tables)
        entities = len(ent_tables.get(ENT_CLASS, ()))
        ent_tables.update(await self._read_rows(
            ENT_MODULE_ROW, wanted.modules, entities, "ENTITY-MIB transceiver rows"))
        ent_tables.update(await self._read_rows(
            ENT_NAME_ROW, wanted.named, entities, "ENTITY-MIB port and sensor names"))
        sensor_entities = sum(1 for c in ent_tables.get(ENT_CLASS, {}).values()
                              if c == CLASS_SENSOR)
        sensor_tables = await self._read_rows(
            SENSOR_STATIC_COLUMNS, wanted.sensors, sensor_entities,
            "ENTITY-SENSOR-MIB sensor rows")  # fmt: skip
        inventory = build_inventory(
            self._name,
            if_tables,
            ent_tables,
            sensor_tables,
            self._pmd_names,
            sys_uptime=uptime,
            last_change=last_change,
        )
        await self._read_neighbours(inventory)
        self._inventory = inventory
        self._maps_pending = self._eeprom_oid is not None
        self._map_notes = {}
        self.discoveries += 1
        log.debug("%s: discovered %d optics, %d sensors", self._name, len(inventory.optics),
                  inventory.sensor_count)  # fmt: skip
        return inventory

    async def _read_rows(
        self, columns: tuple[str, ...], rows: tuple[int, ...], universe: int, what: str
    ) -> dict[str, dict[Oid, object]]:
        """The given columns of the given single-index rows, as walk_columns shapes them.

        GET only when the rows are a small part of the table: through pysnmp a GET costs
        about 2.8x a walked varbind per varbind (227 against 81 µs measured, it resolves
        every requested OID), so reading most of a table is cheaper by walking it all.
        """
        if not rows:
            return {column: {} for column in columns}
        if len(rows) * GET_FRACTION > universe:
            walked = await self._session.walk_columns(columns, what)
            keep = set(rows)
            return {column: {i: v for i, v in table.items() if len(i) == 1 and i[0] in keep}
                    for column, table in walked.items()}  # fmt: skip
        tables: dict[str, dict[Oid, object]] = {column: {} for column in columns}
        instances = [(column, row) for column in columns for row in rows]
        for start in range(0, len(instances), ROW_GET_CHUNK):
            chunk = instances[start : start + ROW_GET_CHUNK]
            got = await self._session.get([f"{c}.{r}" for c, r in chunk], what)
            for column, row in chunk:
                value = got[f"{column}.{row}"]
                if value is not None:
                    tables[column][(row,)] = value
        return tables

    async def _read_neighbours(self, inventory: Inventory) -> None:
        """LLDP neighbours of the optics' ports (collector/snmp/lldp.py), at discovery.
        An agent without the LLDP-MIB answers with empty tables: nothing is set."""
        session = self._session
        try:
            loc = await session.walk_columns(lldp.LOC_COLUMNS, "LLDP-MIB local ports")
            rem = await session.walk_columns(lldp.REM_COLUMNS, "LLDP-MIB neighbours")
        except SnmpError as exc:
            log.info("%s: LLDP neighbours not read (%s)", self._name, exc.message)
            return
        found = lldp.neighbours(loc, rem, {s.identity.port for s in inventory.optics})
        for spec in inventory.optics:
            spec.identity.lldp_far = found.get(spec.identity.port)

    def _maps_due(self, now: float) -> bool:
        return bool(stale_maps(self._maps, self._map_read_at, now, list(self._maps)))

    async def _read_maps(self, inventory: Inventory, now: float) -> None:
        """Fetch the maps of modules not seen before and apply every module's facts."""
        column = self._eeprom_oid
        assert column is not None
        keyed = {
            spec.identity.if_index: (spec.identity.if_index, spec.identity.serial.strip())
            for spec in inventory.optics
            if spec.identity.if_index is not None
        }
        stale = set(stale_maps(self._maps, self._map_read_at, now, keyed.values()))
        missing = [idx for idx, key in keyed.items() if key in stale]
        try:
            found = await self._fetch_maps(column, missing, len(missing) == len(keyed))
        except SnmpError as exc:
            log.info("%s: memory maps not read (%s); trying again next poll", self._name,
                     exc.message)
            return
        for idx in missing:
            data = found.get(idx)
            self._map_read_at[keyed[idx]] = now
            if isinstance(data, bytes) and data:
                self._maps[keyed[idx]] = facts_from_map(data)
            else:
                self._maps[keyed[idx]] = MapFacts(
                    notes=(f"no memory map at {column}.{idx}",))
        self.map_reads += len(missing)
        # Forget modules no longer fitted, so the cache follows the device.
        live_keys = set(keyed.values())
        for key in [k for k in self._maps if k not in live_keys]:
            del self._maps[key]
            self._map_read_at.pop(key, None)
        for spec in inventory.optics:
            if_index = spec.identity.if_index
            if if_index is None:
                continue
            notes = apply_to_identity(spec.identity, self._maps[keyed[if_index]])
            if notes:
                self._map_notes[if_index] = notes
        self._maps_pending = False

    async def _fetch_maps(
        self, column: str, if_indexes: list[int], everything: bool
    ) -> dict[int, object]:
        if not if_indexes:
            return {}
        what = f"module memory maps ({column})"
        if everything or len(if_indexes) > 4 * MAP_GET_CHUNK:
            table = await self._session.walk_columns([column], what, octets=True)
            return {index[0]: v for index, v in table[column].items() if len(index) == 1}
        found: dict[int, object] = {}
        for start in range(0, len(if_indexes), MAP_GET_CHUNK):
            chunk = if_indexes[start : start + MAP_GET_CHUNK]
            got = await self._session.get([f"{column}.{i}" for i in chunk], what, octets=True)
            found.update({i: got[f"{column}.{i}"] for i in chunk})
        return found

    def _build(
        self, inventory: Inventory, live: dict[str, dict[Oid, object]], now: float
    ) -> ReadingBatch:
        values, statuses = live[SENSOR_VALUE], live[SENSOR_STATUS]
        admin, oper = live[IF_ADMIN], live[IF_OPER]
        builder = BatchBuilder(self._name)
        vanished = False
        for spec in inventory.optics:
            identity = spec.identity
            if identity.if_index is not None:
                key = (identity.if_index,)
                identity = dataclasses.replace(
                    identity, admin_up=_up(admin.get(key)), oper_up=_up(oper.get(key))
                )
            else:
                identity = dataclasses.replace(identity)
            slot = builder.add_optic(identity)
            for sensor in spec.sensors:
                key = (sensor.ent_index,)
                if key not in values:
                    vanished = True
                    note = "sensor row missing from the agent"
                    unavailable = ReadingStatus.UNAVAILABLE
                    builder.add(slot, sensor.lane, sensor.quantity, None, unavailable, note)
                    continue
                value, status, note = sensor_value(
                    sensor.sensor_type,
                    sensor.scale,
                    sensor.precision,
                    values[key],
                    sensor.units_display,
                    statuses.get(key, 1),
                )
                if sensor.quantity is Quantity.RX_POWER and identity.if_index in self._map_notes:
                    note = join_note(note, self._map_notes[identity.if_index])
                builder.add(slot, sensor.lane, sensor.quantity, value, status, note)
        if vanished:
            self._inventory = None  # the layout changed under us: look again next time
        return builder.build(now)
