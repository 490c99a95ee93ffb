"""An SNMP device as a poll source: discovery cached, only live columns each poll."""

from __future__ import annotations

import dataclasses
import logging
import time

from lightwarden.collector.readings import BatchBuilder, PollOutcome, ReadingBatch, ReadingStatus
from lightwarden.collector.sensors import sensor_value
from lightwarden.collector.snmp.credentials import SnmpCredentials
from lightwarden.collector.snmp.inventory import (
    ENT_COLUMNS,
    ENT_LAST_CHANGE,
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
)
from lightwarden.collector.snmp.session import EnginePool, SnmpError, SnmpSession

log = logging.getLogger(__name__)

IF_UP = 1  # IF-MIB ifAdminStatus/ifOperStatus up(1)


def _up(value: object) -> bool | None:
    if isinstance(value, int) and not isinstance(value, bool):
        return value == IF_UP
    return None


def _ticks(value: object) -> int | None:
    return value if isinstance(value, int) and not isinstance(value, bool) else None


class SnmpSource:
    """Polls one device's optics over SNMP (IF-MIB, ENTITY-MIB, ENTITY-SENSOR-MIB).

    Discovery (interfaces, the entity tree, sensor type/scale/precision/units) is cached;
    a poll reads sysUpTime and entLastChangeTime, re-discovers when the agent restarted
    (sysUpTime went backwards), the entity tree changed, or the last poll failed, then
    walks only sensor value/status and ifAdminStatus/ifOperStatus.

    Pass one shared :class:`EnginePool` for all sources on an event loop; without one
    the source makes its own (close it with :meth:`close`).
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
        )
        self._pmd_names = pmd_names
        self._inventory: Inventory | None = None
        self.discoveries = 0  # how many times the device was (re)discovered

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

    def close(self) -> None:
        if self._own_engines:
            self._engines.close()

    async def poll(self, now: float) -> PollOutcome:
        started = time.monotonic()
        try:
            batch = await self._poll(now)
        except SnmpError as exc:
            self._inventory = None
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
                error_kind="protocol",
            )
        return PollOutcome(
            device=self._name, started_at=now, duration_s=time.monotonic() - started, batch=batch
        )

    async def _poll(self, now: float) -> ReadingBatch:
        session = self._session
        marks = await session.get([SYS_UPTIME, ENT_LAST_CHANGE], "sysUpTime/entLastChangeTime")
        uptime, last_change = _ticks(marks[SYS_UPTIME]), _ticks(marks[ENT_LAST_CHANGE])
        inventory = self._inventory
        restarted = (
            inventory is not None
            and uptime is not None
            and inventory.sys_uptime is not None
            and uptime < inventory.sys_uptime
        )
        if inventory is None or restarted or last_change != inventory.last_change:
            inventory = await self._discover(uptime, last_change)
        else:
            inventory.sys_uptime = uptime
        live = await session.walk_columns(
            (*SENSOR_LIVE_COLUMNS, *IF_STATUS_COLUMNS), "sensor values and interface status"
        )
        return self._build(inventory, live, now)

    async def _discover(self, uptime: int | None, last_change: int | None) -> Inventory:
        session = self._session
        if_tables = await session.walk_columns(IF_COLUMNS, "IF-MIB interface names")
        ent_tables = await session.walk_columns(ENT_COLUMNS, "ENTITY-MIB physical table")
        sensor_tables = await session.walk_columns(
            SENSOR_STATIC_COLUMNS, "ENTITY-SENSOR-MIB sensor table"
        )
        inventory = build_inventory(
            self._name,
            if_tables,
            ent_tables,
            sensor_tables,
            self._pmd_names,
            sys_uptime=uptime,
            last_change=last_change,
        )
        self._inventory = inventory
        self.discoveries += 1
        log.debug("%s: discovered %d optics, %d sensors", self._name, len(inventory.optics),
                  inventory.sensor_count)  # fmt: skip
        return inventory

    def _build(self, inventory: Inventory, live: dict, now: float) -> ReadingBatch:
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
                builder.add(slot, sensor.lane, sensor.quantity, value, status, note)
        if vanished:
            self._inventory = None  # the layout changed under us: look again next time
        return builder.build(now)
