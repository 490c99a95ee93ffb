"""The history file's schema, its version, and the migrations from every older version.

``PRAGMA user_version`` holds the version. Version 1 (user_version 0, as the first
release wrote it) kept one text-keyed ``reading`` table of raw samples; version 2 keys
samples by a small integer per series and keeps raw samples as one row per device poll
(the series ids and values as packed arrays, so a poll of 200 readings is one insert),
adds the hourly and daily tiers, module temperature, the first-seen baseline per module
serial and a little state.
Each migration runs in one transaction, so a failed one leaves the file as it was.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Sequence

import numpy as np

VERSION = 2

_V2 = """
CREATE TABLE IF NOT EXISTS series (
    id INTEGER PRIMARY KEY,
    device TEXT NOT NULL,
    port TEXT NOT NULL,
    lane INTEGER NOT NULL,
    quantity INTEGER NOT NULL,
    UNIQUE (device, port, lane, quantity)
);
CREATE TABLE IF NOT EXISTS poll (
    id INTEGER PRIMARY KEY,
    device TEXT NOT NULL,
    t INTEGER NOT NULL,
    series BLOB NOT NULL,
    value BLOB NOT NULL
);
CREATE UNIQUE INDEX IF NOT EXISTS poll_by_device ON poll (device, t);
CREATE INDEX IF NOT EXISTS poll_by_time ON poll (t);
CREATE TABLE IF NOT EXISTS hourly (
    series INTEGER NOT NULL,
    t INTEGER NOT NULL,
    n INTEGER NOT NULL,
    min REAL NOT NULL,
    avg REAL NOT NULL,
    max REAL NOT NULL,
    PRIMARY KEY (series, t)
) WITHOUT ROWID;
CREATE INDEX IF NOT EXISTS hourly_by_time ON hourly (t);
CREATE TABLE IF NOT EXISTS daily (
    series INTEGER NOT NULL,
    t INTEGER NOT NULL,
    n INTEGER NOT NULL,
    min REAL NOT NULL,
    avg REAL NOT NULL,
    max REAL NOT NULL,
    PRIMARY KEY (series, t)
) WITHOUT ROWID;
CREATE INDEX IF NOT EXISTS daily_by_time ON daily (t);
CREATE TABLE IF NOT EXISTS baseline (
    serial TEXT NOT NULL,
    lane INTEGER NOT NULL,
    device TEXT NOT NULL,
    port TEXT NOT NULL,
    t REAL NOT NULL,
    n INTEGER NOT NULL,
    tx_dbm REAL,
    bias_ma REAL,
    temperature_c REAL,
    PRIMARY KEY (serial, lane)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS fitted (
    device TEXT NOT NULL,
    port TEXT NOT NULL,
    serial TEXT NOT NULL,
    t REAL NOT NULL,
    PRIMARY KEY (device, port)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS rx_window (
    device TEXT NOT NULL,
    port TEXT NOT NULL,
    lane INTEGER NOT NULL,
    pmd TEXT NOT NULL,
    sensitivity REAL,
    overload REAL,
    source TEXT NOT NULL,
    t REAL NOT NULL,
    PRIMARY KEY (device, port, lane)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS state (
    key TEXT PRIMARY KEY,
    value REAL NOT NULL
) WITHOUT ROWID;
"""


#: raw samples are one row per device poll: the series ids and the values as arrays
ID_DTYPE = np.dtype("<i4")
VALUE_DTYPE = np.dtype("<f8")


def pack_ids(ids: Sequence[int] | np.ndarray) -> bytes:
    return np.asarray(ids, dtype=ID_DTYPE).tobytes()


def pack_values(values: Sequence[float] | np.ndarray) -> bytes:
    return np.asarray(values, dtype=VALUE_DTYPE).tobytes()


class SchemaError(RuntimeError):
    pass


def _create(db: sqlite3.Connection) -> None:
    # one statement at a time: executescript would commit the migration's transaction
    for stmt in _V2.split(";"):
        if stmt.strip():
            db.execute(stmt)


def _from_v1(db: sqlite3.Connection) -> None:
    """Text-keyed raw samples -> series ids and the raw tier (the next sweep rolls up)."""
    _create(db)
    has_old = db.execute(
        "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'reading'").fetchone()
    if not has_old:
        return
    db.execute("INSERT OR IGNORE INTO series (device, port, lane, quantity) "
               "SELECT DISTINCT device, port, lane, quantity FROM reading")
    rows = db.execute(
        "SELECT r.device, CAST(round(r.t) AS INTEGER), s.id, r.value FROM reading r "
        "JOIN series s USING (device, port, lane, quantity) ORDER BY r.device, r.t, s.id")
    polls: dict[tuple[str, int], tuple[list[int], list[float]]] = {}
    for device, t, sid, value in rows:
        ids, values = polls.setdefault((device, t), ([], []))
        ids.append(sid)
        values.append(value)
    db.executemany("INSERT OR REPLACE INTO poll (device, t, series, value) VALUES (?, ?, ?, ?)",
                   [(d, t, pack_ids(ids), pack_values(v)) for (d, t), (ids, v) in polls.items()])
    db.execute("DROP TABLE reading")


_MIGRATIONS = {0: _from_v1, 1: _from_v1}


def migrate(db: sqlite3.Connection) -> int:
    """Bring the file to VERSION; returns the version it had. Refuses newer files."""
    (found,) = db.execute("PRAGMA user_version").fetchone()
    if found > VERSION:
        raise SchemaError(f"written by a newer lightwarden (schema {found}, this one "
                          f"reads up to {VERSION})")
    if found == VERSION:
        return int(found)
    with db:
        db.execute("BEGIN")
        _MIGRATIONS[found](db)
        db.execute(f"PRAGMA user_version = {VERSION}")
    return int(found)
