"""Reading history in SQLite: raw samples for a while, then hourly and daily min/avg/max.

What trends, forecasts and "how fast is it moving" read. Only the quantities that age
(Rx power, Tx power, bias) and module temperature (which bias and Tx are judged
against) are kept, at most one sample per device every ``every_s`` seconds.

Tiers: raw samples for ``raw_days``; hourly min/avg/max for ``hourly_days``; daily
min/avg/max for ``daily_days`` (ten years by default). Each module's first-seen
readings (by serial) live in their own table, which retention never touches.
Roll-ups and retention run as a sweep at most every ``sweep_every_s`` of sample time,
never per insert: every statement of it goes by a time index, so its cost is the hour's
samples, not the store's size. The file is in WAL mode; a file not closed cleanly gets
``PRAGMA quick_check`` when opened, and ``check()`` runs the full integrity check.
"""

from __future__ import annotations

import math
import sqlite3
import threading
from itertools import repeat
from pathlib import Path
from typing import Literal

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch, ReadingStatus
from lightwarden.exporters.store.schema import SchemaError, migrate
from lightwarden.rules.outlook import RxWindow, Series
from lightwarden.rules.trend import Baseline

KEPT = (int(Quantity.RX_POWER), int(Quantity.TX_POWER), int(Quantity.BIAS),
        int(Quantity.TEMPERATURE))
HOUR = 3600
DAY = 86400
#: polls averaged into a module's first-seen baseline (one poll is one noisy reading)
BASELINE_POLLS = 5
Tier = Literal["raw", "hourly", "daily"]
_BASELINE_COLUMN = {int(Quantity.TX_POWER): "tx_dbm", int(Quantity.BIAS): "bias_ma",
                    int(Quantity.TEMPERATURE): "temperature_c"}


class HistoryError(RuntimeError):
    pass


class History:
    """Thread-safe: the poller writes, the HTTP and report code read."""

    def __init__(self, path: str | Path, every_s: float = 900.0, keep_days: float = 400.0,
                 *, raw_days: float = 14.0, daily_days: float = 3650.0,
                 sweep_every_s: float = 3600.0):
        self.path = Path(path)
        self.every_s = every_s
        self.raw_s = raw_days * DAY
        self.hourly_s = keep_days * DAY
        self.daily_s = max(daily_days, keep_days) * DAY
        self.sweep_every_s = sweep_every_s
        self.recovered = False  # the file was not closed cleanly and passed quick_check
        self._lock = threading.Lock()
        self._last_kept: dict[str, float] = {}
        self._ids: dict[tuple[str, str, int, int], int] = {}
        self._baseline_n: dict[tuple[str, int], int] = {}
        self._fitted: dict[tuple[str, str], str] = {}
        self._dirty_from: float | None = None
        self._closed = False
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._db = sqlite3.connect(str(self.path), check_same_thread=False)
        except (OSError, sqlite3.Error) as exc:
            raise HistoryError(f"history {self.path}: {exc}") from None
        try:
            self._open()
        except (sqlite3.Error, SchemaError) as exc:
            self._db.close()
            raise HistoryError(f"history {self.path}: {exc}") from None

    def _open(self) -> None:
        db = self._db
        db.execute("PRAGMA journal_mode=WAL")
        # NORMAL in WAL: a crashed process loses nothing committed; a lost power supply
        # at most the last commits (one poll each), never the file's consistency
        db.execute("PRAGMA synchronous=NORMAL")
        migrate(db)
        if self._state("open") == 1.0:
            problems = [r[0] for r in db.execute("PRAGMA quick_check").fetchall()]
            if problems != ["ok"]:
                raise HistoryError(
                    f"history {self.path}: not closed cleanly, and quick_check found: "
                    f"{'; '.join(problems[:5])}. Move the file aside (or restore a copy) "
                    "and start again; `lightwarden history check` runs the full check")
            self.recovered = True
        with db:
            self._set_state("open", 1.0)
        self._ids = {(d, p, int(la), int(q)): int(i) for i, d, p, la, q in db.execute(
            "SELECT id, device, port, lane, quantity FROM series")}
        self._baseline_n = {(s, int(la)): int(n) for s, la, n in db.execute(
            "SELECT serial, lane, n FROM baseline")}
        self._fitted = {(d, p): s for d, p, s in db.execute(
            "SELECT device, port, serial FROM fitted")}
        swept = self._state("swept_until")
        self._next_sweep = (swept + self.sweep_every_s) if swept is not None else -math.inf

    def _state(self, key: str) -> float | None:
        row = self._db.execute("SELECT value FROM state WHERE key = ?", (key,)).fetchone()
        return None if row is None else float(row[0])

    def _set_state(self, key: str, value: float) -> None:
        self._db.execute("INSERT OR REPLACE INTO state VALUES (?, ?)", (key, value))

    def close(self) -> None:
        with self._lock:
            if self._closed:
                return
            self._closed = True
            try:
                with self._db:
                    self._set_state("open", 0.0)
            except sqlite3.Error:
                pass  # the next open runs quick_check instead
            self._db.close()

    # -- writing ------------------------------------------------------------------
    def _series_ids(self, keys: list[tuple[str, str, int, int]]) -> list[int]:
        ids = self._ids
        missing = [k for k in dict.fromkeys(keys) if k not in ids]
        for k in missing:
            cur = self._db.execute(
                "INSERT INTO series (device, port, lane, quantity) VALUES (?, ?, ?, ?)", k)
            ids[k] = int(cur.lastrowid or 0)
        return [ids[k] for k in keys]

    def record(self, batch: ReadingBatch, windows: list[RxWindow] | None = None,
               force: bool = False) -> int:
        """Keep this batch's ageing quantities if the device's last kept one is old enough.

        ``windows`` (the Rx windows of this poll) replace the stored ones when kept.
        Returns how many reading rows were written (0 when skipped). Runs the sweep when
        one is due by sample time.
        """
        last = self._last_kept.get(batch.device)
        if not force and last is not None and batch.taken_at - last < self.every_s:
            return 0
        mask = (batch.status == ReadingStatus.OK) & np.isin(batch.quantity, KEPT)
        idx = np.flatnonzero(mask)
        if idx.size == 0:
            return 0
        optic = batch.optic[idx].tolist()
        lane = batch.lane[idx].tolist()
        qty = batch.quantity[idx].tolist()
        value = batch.value[idx].tolist()
        ports = [o.port for o in batch.optics]
        dev = batch.device
        keys = [(dev, ports[o], la, q) for o, la, q in zip(optic, lane, qty, strict=True)]
        t = round(batch.taken_at)
        with self._lock:
            try:
                with self._db:
                    ids = self._series_ids(keys)
                    self._db.executemany("INSERT OR REPLACE INTO raw VALUES (?, ?, ?)",
                                         zip(ids, repeat(t), value))
                    self._note_modules(batch, optic, lane, qty, value)
                    if windows:
                        self._db.executemany(
                            "INSERT OR REPLACE INTO rx_window VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                            [(w.device, w.port, w.lane, w.pmd, w.sensitivity, w.overload,
                              w.source, w.t) for w in windows])
                self._dirty_from = t if self._dirty_from is None else min(self._dirty_from, t)
                if t >= self._next_sweep:
                    self._sweep(t)
            except sqlite3.Error as exc:
                raise HistoryError(f"history {self.path}: {exc}") from None
        self._last_kept[batch.device] = batch.taken_at
        return len(keys)

    def _note_modules(self, batch: ReadingBatch, optic: list[int], lane: list[int],
                      qty: list[int], value: list[float]) -> None:
        """Which serial sits in each port, and the first polls of each serial's baseline."""
        db, t = self._db, batch.taken_at
        for o in set(optic):
            ident = batch.optics[o]
            if ident.serial and self._fitted.get((batch.device, ident.port)) != ident.serial:
                db.execute("INSERT OR REPLACE INTO fitted VALUES (?, ?, ?, ?)",
                           (batch.device, ident.port, ident.serial, t))
                self._fitted[(batch.device, ident.port)] = ident.serial
        for o, la, q, v in zip(optic, lane, qty, value, strict=True):
            serial = batch.optics[o].serial
            col = _BASELINE_COLUMN.get(q)
            if not serial or col is None:
                continue
            n = self._baseline_n.get((serial, la))
            if n is None:
                db.execute("INSERT OR IGNORE INTO baseline (serial, lane, device, port, t, n) "
                           "VALUES (?, ?, ?, ?, ?, 0)", (serial, la, batch.device,
                                                         batch.optics[o].port, t))
                n = self._baseline_n[(serial, la)] = 0
            if n >= BASELINE_POLLS:
                continue
            # running mean of the first polls, per quantity (each counts its own polls)
            db.execute(f"UPDATE baseline SET {col} = coalesce({col} * ? / (? + 1), 0) "
                       f"+ ? / (? + 1) WHERE serial = ? AND lane = ?",
                       (n, n, v, n, serial, la))
        seen = {(batch.optics[o].serial, la) for o, la, q in zip(optic, lane, qty, strict=True)
                if batch.optics[o].serial and q in _BASELINE_COLUMN}
        for key in seen:
            n = self._baseline_n[key]
            if n < BASELINE_POLLS:
                db.execute("UPDATE baseline SET n = n + 1 WHERE serial = ? AND lane = ?", key)
                self._baseline_n[key] = n + 1

    # -- the sweep ------------------------------------------------------------------
    def sweep(self, now: float) -> None:
        """Roll complete hours and days up from what was written, then apply retention."""
        with self._lock:
            try:
                self._sweep(round(now))
            except sqlite3.Error as exc:
                raise HistoryError(f"history {self.path}: {exc}") from None

    def _sweep(self, now: int) -> None:
        db = self._db
        raw_cut = now - int(self.raw_s)
        with db:
            if self._dirty_from is not None:
                # an hour whose raw samples retention has taken cannot be recomputed
                start_h = max(int(self._dirty_from) // HOUR * HOUR, raw_cut // HOUR * HOUR)
                end_h = now // HOUR * HOUR  # the current hour is not complete
                if start_h < end_h:
                    db.execute(
                        "INSERT OR REPLACE INTO hourly SELECT series, t - t % 3600, count(*), "
                        "min(value), avg(value), max(value) FROM raw WHERE t >= ? AND t < ? "
                        "GROUP BY series, t - t % 3600", (start_h, end_h))
                start_d = start_h // DAY * DAY
                end_d = end_h // DAY * DAY
                if start_d < end_d:
                    db.execute(
                        "INSERT OR REPLACE INTO daily SELECT series, t - t % 86400, sum(n), "
                        "min(min), sum(avg * n) / sum(n), max(max) FROM hourly "
                        "WHERE t >= ? AND t < ? GROUP BY series, t - t % 86400",
                        (start_d, end_d))
                # what is left to roll up next time: the incomplete hour and day
                self._dirty_from = float(min(end_h, end_d))
            db.execute("DELETE FROM raw WHERE t < ?", (raw_cut,))
            db.execute("DELETE FROM hourly WHERE t < ?", (now - int(self.hourly_s),))
            db.execute("DELETE FROM daily WHERE t < ?", (now - int(self.daily_s),))
            self._set_state("swept_until", float(now))
        self._next_sweep = now + self.sweep_every_s

    # -- reading --------------------------------------------------------------------
    def _id(self, device: str, port: str, lane: int, quantity: Quantity) -> int | None:
        return self._ids.get((device, port, lane, int(quantity)))

    def series(self, device: str, port: str, lane: int, quantity: Quantity,
               since: float | None = None, tier: Tier | None = None) -> Series:
        """One quantity over time: the finest tier kept at each moment, or one ``tier``.

        Hourly and daily points are their bin's average, placed at the bin's middle.
        Without ``tier``: raw where raw samples are kept, hourly before that, daily
        before the hourly tier begins.
        """
        lo = -(2**62) if since is None else math.floor(since)
        with self._lock:
            sid = self._id(device, port, lane, quantity)
            if sid is None:
                return Series(np.empty(0), np.empty(0))
            db = self._db
            if tier is not None:
                got = self._tier(sid, tier, lo, 2**62)
            else:
                raw_from = db.execute("SELECT min(t) FROM raw WHERE series = ?",
                                      (sid,)).fetchone()[0]
                hourly_from = db.execute("SELECT min(t) FROM hourly WHERE series = ?",
                                         (sid,)).fetchone()[0]
                raw_from = 2**62 if raw_from is None else int(raw_from)
                hourly_from = raw_from if hourly_from is None else int(hourly_from)
                got = (self._tier(sid, "daily", lo, min(hourly_from, raw_from) - DAY + 1)
                       + self._tier(sid, "hourly", lo, raw_from - HOUR + 1)
                       + self._tier(sid, "raw", max(lo, raw_from), 2**62))
        arr = np.asarray(got, dtype=np.float64).reshape(-1, 2)
        return Series(np.ascontiguousarray(arr[:, 0]), np.ascontiguousarray(arr[:, 1]))

    def _tier(self, sid: int, tier: Tier, lo: int, hi: int) -> list[tuple[float, float]]:
        """Rows of one tier whose bins start in [lo, hi), as (time, value)."""
        if tier == "raw":
            q = "SELECT t, value FROM raw WHERE series = ? AND t >= ? AND t < ? ORDER BY t"
        else:
            half = (HOUR if tier == "hourly" else DAY) // 2
            q = (f"SELECT t + {half}, avg FROM {tier} WHERE series = ? AND t >= ? AND t < ? "
                 "ORDER BY t")
        rows: list[tuple[float, float]] = self._db.execute(q, (sid, lo, hi)).fetchall()
        return rows

    def summary(self, device: str, port: str, lane: int, quantity: Quantity,
                tier: Literal["hourly", "daily"], since: float | None = None
                ) -> np.ndarray:
        """(bin start, n, min, avg, max) rows of one tier, as a float64 array."""
        lo = -(2**62) if since is None else math.floor(since)
        with self._lock:
            sid = self._id(device, port, lane, quantity)
            if sid is None:
                return np.empty((0, 5))
            got = self._db.execute(f"SELECT t, n, min, avg, max FROM {tier} WHERE series = ? "
                                   "AND t >= ? ORDER BY t", (sid, lo)).fetchall()
        return np.asarray(got, dtype=np.float64).reshape(-1, 5)

    def keys(self) -> list[tuple[str, str, int, int]]:
        with self._lock:
            return sorted(self._ids)

    def rx_windows(self) -> list[RxWindow]:
        with self._lock:
            got = self._db.execute(
                "SELECT device, port, lane, pmd, sensitivity, overload, source, t "
                "FROM rx_window ORDER BY device, port, lane"
            ).fetchall()
        return [RxWindow(*row) for row in got]

    def baseline(self, device: str, port: str, lane: int) -> Baseline | None:
        """The first-seen readings of the module now in ``port`` (None: serial unknown)."""
        with self._lock:
            serial = self._fitted.get((device, port))
            if serial is None:
                return None
            row = self._db.execute(
                "SELECT t, tx_dbm, bias_ma FROM baseline WHERE serial = ? AND lane = ?",
                (serial, lane)).fetchone()
            temp = self._db.execute(
                "SELECT temperature_c FROM baseline WHERE serial = ? AND lane = 0",
                (serial,)).fetchone()
        if row is None:
            return None
        return Baseline(serial=serial, t=float(row[0]), tx_dbm=row[1], bias_ma=row[2],
                        temperature_c=temp[0] if temp is not None else None)

    def check(self) -> list[str]:
        """The full ``PRAGMA integrity_check``: [] when the file is sound."""
        with self._lock:
            try:
                got = [r[0] for r in self._db.execute("PRAGMA integrity_check").fetchall()]
            except sqlite3.Error as exc:
                return [str(exc)]
        return [] if got == ["ok"] else got

    def counts(self) -> dict[str, int]:
        """Rows per table, for the disk-cost figures and the check command."""
        with self._lock:
            return {t: int(self._db.execute(f"SELECT count(*) FROM {t}").fetchone()[0])
                    for t in ("series", "raw", "hourly", "daily", "baseline")}
