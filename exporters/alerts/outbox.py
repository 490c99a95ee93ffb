"""Durable outbox for alert events, plus small persisted state snapshots (SQLite, WAL).

An event is written here, once per destination, before anything tries to send it, and
leaves only when that destination accepted it. A crash, a receiver outage or a restart
therefore loses nothing: the next dispatcher resumes from what is still here.

``put`` is idempotent per (key, sequence, destination): a UNIQUE constraint swallows
repeats, and a tombstone of recently delivered identities stops an event that was
already delivered from being queued again (e.g. when the lifecycle replays a step after
a restart from an older state snapshot).

One connection guarded by a lock serves all threads: the traffic is a few rows per poll,
so contention is not worth a pool.
"""

from __future__ import annotations

import json
import sqlite3
import threading
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType
from typing import Any

from lightwarden.rules import event_codec
from lightwarden.rules.findings import AlertEvent

# Long enough to cover any plausible replay window after a restart; short enough that the
# tombstone table stays small.
DELIVERED_RETENTION_S = 7 * 86400.0

_SCHEMA = """
CREATE TABLE IF NOT EXISTS outbox (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    destination TEXT NOT NULL,
    key TEXT NOT NULL,
    sequence INTEGER NOT NULL,
    body TEXT NOT NULL,
    queued_at REAL NOT NULL,
    attempts INTEGER NOT NULL DEFAULT 0,
    last_error TEXT,
    UNIQUE (key, sequence, destination)
);
CREATE INDEX IF NOT EXISTS outbox_by_destination ON outbox (destination, id);
CREATE TABLE IF NOT EXISTS delivered (
    key TEXT NOT NULL,
    sequence INTEGER NOT NULL,
    destination TEXT NOT NULL,
    delivered_at REAL NOT NULL,
    PRIMARY KEY (key, sequence, destination)
);
CREATE TABLE IF NOT EXISTS dead_letter (
    id INTEGER PRIMARY KEY,
    destination TEXT NOT NULL,
    key TEXT NOT NULL,
    sequence INTEGER NOT NULL,
    body TEXT NOT NULL,
    reason TEXT NOT NULL,
    buried_at REAL NOT NULL
);
CREATE TABLE IF NOT EXISTS state (
    name TEXT PRIMARY KEY,
    body TEXT NOT NULL,
    saved_at REAL NOT NULL
);
"""


class OutboxError(RuntimeError):
    """The outbox file cannot be opened or holds something we cannot read."""


@dataclass(slots=True, frozen=True)
class OutboxItem:
    """One queued event for one destination."""

    id: int
    destination: str
    event: AlertEvent
    attempts: int


def event_to_dict(event: AlertEvent) -> dict[str, Any]:
    """Plain JSON-safe dict of an event (words, not members; None for non-finite numbers)."""
    return event_codec.event_to_dict(event)


def event_from_dict(data: dict[str, Any]) -> AlertEvent:
    """An event from a stored row; OutboxError names the field that cannot be read."""
    try:
        return event_codec.event_from_dict(data, "stored alert event")
    except ValueError as exc:
        raise OutboxError(str(exc)) from None


def check_event(event: AlertEvent) -> None:
    """Reject an event we could not deliver sensibly, naming what is wrong.

    Its kind needs no check: AlertEvent refuses anything but an AlertKind.
    """
    if not event.key:
        raise ValueError(f"alert event {event.alertname!r}: empty key")
    if event.sequence < 0:
        raise ValueError(f"alert event {event.key!r}: negative sequence {event.sequence}")


class Outbox:
    """SQLite-backed queue of alert events per destination, and named state snapshots."""

    def __init__(self, path: str | Path, clock: Callable[[], float] = time.time) -> None:
        self.path = Path(path)
        self._clock = clock
        self._lock = threading.Lock()
        try:
            if str(path) != ":memory:":
                self.path.parent.mkdir(parents=True, exist_ok=True)
            # Autocommit mode; transactions are opened explicitly with BEGIN IMMEDIATE.
            self._db = sqlite3.connect(
                str(path), isolation_level=None, check_same_thread=False, timeout=30.0
            )
            self._db.execute("PRAGMA journal_mode=WAL")
            # FULL: an alert accepted into the outbox must survive a power cut, and the
            # volume is tiny, so the extra fsync costs nothing that matters.
            self._db.execute("PRAGMA synchronous=FULL")
            self._db.executescript(_SCHEMA)
        except (sqlite3.Error, OSError) as exc:
            raise OutboxError(f"cannot open alert outbox {self.path}: {exc}") from None

    # -- lifecycle -------------------------------------------------------------------

    def close(self) -> None:
        with self._lock:
            self._db.close()

    def __enter__(self) -> Outbox:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- queue -----------------------------------------------------------------------

    def put(self, event: AlertEvent, destinations: Iterable[str]) -> int:
        """Queue ``event`` for each destination; returns how many rows were new."""
        return self.put_many([event], destinations)

    def put_many(self, events: Sequence[AlertEvent], destinations: Iterable[str]) -> int:
        """Queue several events for the same destinations in one transaction."""
        dests = list(destinations)
        return self.put_routed([(ev, dests) for ev in events])

    def put_routed(self, routed: Sequence[tuple[AlertEvent, Sequence[str]]]) -> int:
        """Queue each event for its own destinations, in order, all or nothing."""
        for ev, _ in routed:
            check_event(ev)
        now = self._clock()
        added = 0
        with self._lock, self._tx():
            for ev, dests in routed:
                body = json.dumps(event_to_dict(ev), allow_nan=False, sort_keys=True)
                for dest in dests:
                    done = self._db.execute(
                        "SELECT 1 FROM delivered WHERE key=? AND sequence=? AND destination=?",
                        (ev.key, ev.sequence, dest),
                    ).fetchone()
                    if done:
                        continue
                    cur = self._db.execute(
                        "INSERT OR IGNORE INTO outbox (destination, key, sequence, body, "
                        "queued_at) VALUES (?, ?, ?, ?, ?)",
                        (dest, ev.key, ev.sequence, body, now),
                    )
                    added += cur.rowcount
        return added

    def pending(self, destination: str, limit: int = 100) -> list[OutboxItem]:
        """Queued events for one destination, oldest first."""
        with self._lock:
            rows = self._db.execute(
                "SELECT id, destination, body, attempts FROM outbox WHERE destination=? "
                "ORDER BY id LIMIT ?",
                (destination, limit),
            ).fetchall()
        items = []
        for row_id, dest, body, attempts in rows:
            try:
                event = event_from_dict(json.loads(body))
            except (ValueError, TypeError, OutboxError) as exc:
                # A row we cannot read would block its destination forever: set it aside.
                self.bury([row_id], f"unreadable row: {exc}")
                continue
            items.append(OutboxItem(row_id, dest, event, attempts))
        return items

    def ack(self, ids: Iterable[int]) -> None:
        """The receiver accepted these rows: delete them, keeping a delivery tombstone."""
        ids = list(ids)
        if not ids:
            return
        now = self._clock()
        with self._lock, self._tx():
            for row_id in ids:
                row = self._db.execute(
                    "SELECT key, sequence, destination FROM outbox WHERE id=?", (row_id,)
                ).fetchone()
                if row is None:
                    continue
                self._db.execute(
                    "INSERT OR REPLACE INTO delivered (key, sequence, destination, delivered_at)"
                    " VALUES (?, ?, ?, ?)",
                    (*row, now),
                )
                self._db.execute("DELETE FROM outbox WHERE id=?", (row_id,))
            self._db.execute(
                "DELETE FROM delivered WHERE delivered_at < ?", (now - DELIVERED_RETENTION_S,)
            )

    def record_failure(self, ids: Iterable[int], error: str) -> None:
        """Count a failed attempt (the error text must already be free of secrets)."""
        with self._lock, self._tx():
            for row_id in ids:
                self._db.execute(
                    "UPDATE outbox SET attempts = attempts + 1, last_error=? WHERE id=?",
                    (error[:500], row_id),
                )

    def bury(self, ids: Iterable[int], reason: str) -> None:
        """Move rows a receiver rejected for good to the dead-letter table (kept, not sent)."""
        now = self._clock()
        with self._lock, self._tx():
            for row_id in ids:
                row = self._db.execute(
                    "SELECT id, destination, key, sequence, body FROM outbox WHERE id=?",
                    (row_id,),
                ).fetchone()
                if row is None:
                    continue
                self._db.execute(
                    "INSERT OR REPLACE INTO dead_letter (id, destination, key, sequence, body,"
                    " reason, buried_at) VALUES (?, ?, ?, ?, ?, ?, ?)",
                    (*row, reason[:500], now),
                )
                self._db.execute("DELETE FROM outbox WHERE id=?", (row_id,))

    def backlog(self) -> dict[str, int]:
        """Queued rows per destination (for metrics and status)."""
        with self._lock:
            rows = self._db.execute(
                "SELECT destination, COUNT(*) FROM outbox GROUP BY destination"
            ).fetchall()
        return dict(rows)

    def dead_letters(self, destination: str | None = None) -> list[tuple[str, AlertEvent, str]]:
        """(destination, event, reason) of every buried row, oldest first."""
        sql = "SELECT destination, body, reason FROM dead_letter"
        args: tuple[str, ...] = ()
        if destination is not None:
            sql += " WHERE destination=?"
            args = (destination,)
        with self._lock:
            rows = self._db.execute(sql + " ORDER BY id", args).fetchall()
        out = []
        for dest, body, reason in rows:
            try:
                out.append((dest, event_from_dict(json.loads(body)), reason))
            except (ValueError, TypeError, OutboxError):
                continue
        return out

    # -- state snapshots -------------------------------------------------------------

    def save_state(self, name: str, state: dict[str, Any]) -> None:
        """Replace the snapshot called ``name`` (must be JSON-serialisable)."""
        self.save_states({name: state})

    def save_states(self, states: Mapping[str, dict[str, Any]]) -> None:
        """Replace several snapshots in one transaction: all are saved or none is, so
        snapshots that belong together (alert lifecycle, held conditions) never part."""
        bodies = []
        for name, state in states.items():
            try:
                bodies.append((name, json.dumps(state, allow_nan=False, sort_keys=True)))
            except (TypeError, ValueError) as exc:
                raise ValueError(
                    f"state snapshot {name!r} is not JSON-serialisable: {exc}") from None
        if not bodies:
            return
        now = self._clock()
        with self._lock, self._tx():
            self._db.executemany(
                "INSERT OR REPLACE INTO state (name, body, saved_at) VALUES (?, ?, ?)",
                [(name, body, now) for name, body in bodies],
            )

    def state_names(self, prefix: str) -> list[str]:
        """Names of the saved snapshots starting with ``prefix``."""
        with self._lock:
            rows = self._db.execute("SELECT name FROM state ORDER BY name").fetchall()
        return [r[0] for r in rows if str(r[0]).startswith(prefix)]

    def load_state(self, name: str) -> dict[str, Any] | None:
        """The last snapshot saved under ``name``, or None if there is none."""
        with self._lock:
            row = self._db.execute("SELECT body FROM state WHERE name=?", (name,)).fetchone()
        if row is None:
            return None
        try:
            body = json.loads(row[0])
        except ValueError as exc:
            raise OutboxError(f"state snapshot {name!r} in {self.path} is corrupt: {exc}") from None
        if not isinstance(body, dict):
            raise OutboxError(f"state snapshot {name!r} in {self.path} is not a JSON object")
        return body

    # -- internals -------------------------------------------------------------------

    def _tx(self) -> _Transaction:
        return _Transaction(self._db)


class _Transaction:
    """BEGIN IMMEDIATE ... COMMIT, rolled back on error (callers already hold the lock)."""

    __slots__ = ("_db",)

    def __init__(self, db: sqlite3.Connection) -> None:
        self._db = db

    def __enter__(self) -> None:
        self._db.execute("BEGIN IMMEDIATE")

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is None:
            self._db.execute("COMMIT")
        else:
            self._db.execute("ROLLBACK")
