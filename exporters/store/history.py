"""Reading history in SQLite: raw samples for a while, then hourly and daily min/avg/max.

What trends, forecasts and "how fast is it moving" read. Only the quantities that age
(Rx power, Tx power, bias) and module temperature (which bias and Tx are judged
against) are kept, at most one sample per device every ``every_s`` seconds.

Tiers: raw samples for ``raw_days``; hourly min/avg/max for ``keep_days``; daily
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
from pathlib import Path
from typing import Literal

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch, ReadingStatus
from lightwarden.exporters.store.schema import (
    ID_DTYPE,
    VALUE_DTYPE,
    SchemaError,
    migrate,
    pack_ids,
    pack_values,
)
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

    def __init__(self, path: str | Path, every_s: float = 900.0, keep_days: float = 120.0,
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
        self._pending: dict[tuple[str, int], dict[str, tuple[float, int]]] = {}
        self._fitted: dict[tuple[str, str], str] = {}
        self._layouts: dict[str, tuple[object, bytes]] = {}
        self._modules_done: dict[str, bool] = {}
        # where the roll-ups stand: raw samples from _hours_from on are not in the hourly
        # tier yet, hourly rows from _days_from on not in the daily one (kept in state, so
        # an hour left half-written by a restart is still rolled up)
        self._hours_from: float | None = None
        self._days_from: float | None = None
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
        self._baseline_n = {}
        self._pending = {}
        for serial, la, n, tx, bias, temp in db.execute(
                "SELECT serial, lane, n, tx_dbm, bias_ma, temperature_c FROM baseline"):
            key = (serial, int(la))
            self._baseline_n[key] = int(n)
            if n < BASELINE_POLLS:  # resume the running means where the last run left them
                self._pending[key] = {c: (float(v) * n, int(n)) for c, v in
                                      (("tx_dbm", tx), ("bias_ma", bias),
                                       ("temperature_c", temp)) if v is not None}
        self._fitted = {(d, p): s for d, p, s in db.execute(
            "SELECT device, port, serial FROM fitted")}
        self._hours_from = self._state("hours_from")
        self._days_from = self._state("days_from")
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
        value = batch.value[idx]
        t = round(batch.taken_at)
        with self._lock:
            try:
                with self._db:
                    ids, fresh = self._layout(batch, idx)
                    self._db.execute(
                        "INSERT OR REPLACE INTO poll (device, t, series, value) "
                        "VALUES (?, ?, ?, ?)", (batch.device, t, ids, pack_values(value)))
                    if fresh or not self._modules_done.get(batch.device, False):
                        self._note_modules(batch, idx, value.tolist())
                    if windows:
                        self._db.executemany(
                            "INSERT OR REPLACE INTO rx_window VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                            [(w.device, w.port, w.lane, w.pmd, w.sensitivity, w.overload,
                              w.source, w.t) for w in windows])
                self._hours_from = t if self._hours_from is None else min(self._hours_from, t)
                if t >= self._next_sweep:
                    self._sweep(t)
            except sqlite3.Error as exc:
                raise HistoryError(f"history {self.path}: {exc}") from None
        self._last_kept[batch.device] = batch.taken_at
        return int(value.size)

    def _layout(self, batch: ReadingBatch, idx: np.ndarray) -> tuple[bytes, bool]:
        """Series ids of the kept rows; reused while the device's rows keep their layout.

        A device's polls repeat the same optics, lanes and quantities in the same order,
        so the per-row key lookups run only when that changes (a module fitted, pulled,
        or a reading missing); True as the second item when they ran.
        """
        sig = (tuple((o.port, o.serial) for o in batch.optics), idx.tobytes(),
               batch.optic[idx].tobytes(), batch.lane[idx].tobytes(),
               batch.quantity[idx].tobytes())
        got = self._layouts.get(batch.device)
        if got is not None and got[0] == sig:
            return got[1], False
        ports = [o.port for o in batch.optics]
        keys = [(batch.device, ports[o], la, q) for o, la, q in zip(
            batch.optic[idx].tolist(), batch.lane[idx].tolist(), batch.quantity[idx].tolist(),
            strict=True)]
        ids = pack_ids(self._series_ids(keys))
        self._layouts[batch.device] = (sig, ids)
        return ids, True

    def _note_modules(self, batch: ReadingBatch, idx: np.ndarray, value: list[float]) -> None:
        """Which serial sits in each port, and the first polls of each serial's baseline."""
        db, t = self._db, batch.taken_at
        optic = batch.optic[idx].tolist()
        lane = batch.lane[idx].tolist()
        qty = batch.quantity[idx].tolist()
        for o in set(optic):
            ident = batch.optics[o]
            if ident.serial and self._fitted.get((batch.device, ident.port)) != ident.serial:
                db.execute("INSERT OR REPLACE INTO fitted VALUES (?, ?, ?, ?)",
                           (batch.device, ident.port, ident.serial, t))
                self._fitted[(batch.device, ident.port)] = ident.serial
        # the running means are kept in memory and written at the first poll (so a new
        # module has a baseline at once) and when the last poll of the baseline is in
        touched: dict[tuple[str, int], tuple[str, str]] = {}
        for o, la, q, v in zip(optic, lane, qty, value, strict=True):
            serial = batch.optics[o].serial
            col = _BASELINE_COLUMN.get(q)
            if not serial or col is None:
                continue
            key = (serial, la)
            if self._baseline_n.get(key, 0) >= BASELINE_POLLS:
                continue
            acc = self._pending.setdefault(key, {})
            total, count = acc.get(col, (0.0, 0))
            acc[col] = (total + v, count + 1)
            touched[key] = (batch.device, batch.optics[o].port)
        done = True
        for key, (device, port) in touched.items():
            n = self._baseline_n.get(key, 0) + 1
            self._baseline_n[key] = n
            means = {c: tot / cnt for c, (tot, cnt) in self._pending[key].items()}
            cols = [means.get(c) for c in ("tx_dbm", "bias_ma", "temperature_c")]
            if n == 1:
                db.execute("INSERT OR REPLACE INTO baseline VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                           (key[0], key[1], device, port, t, n, *cols))
            elif n >= BASELINE_POLLS:
                db.execute("UPDATE baseline SET n = ?, tx_dbm = ?, bias_ma = ?, "
                           "temperature_c = ? WHERE serial = ? AND lane = ?",
                           (n, *cols, key[0], key[1]))
                del self._pending[key]
            done = done and n >= BASELINE_POLLS
        # every module of the device has its baseline: skip this until its layout changes
        self._modules_done[batch.device] = done

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
            end_h = now // HOUR * HOUR  # the current hour is not complete
            if self._hours_from is not None:
                # an hour whose raw samples an earlier sweep has begun to delete cannot be
                # redone (this sweep deletes only after rolling up)
                cut = self._state("raw_cut")
                first_whole = -(-int(cut) // HOUR) * HOUR if cut is not None else -(2**62)
                start_h = max(int(self._hours_from) // HOUR * HOUR, first_whole)
                for lo in range(start_h, end_h, DAY):  # a day at a time bounds the memory
                    self._roll_hours(lo, min(lo + DAY, end_h))
                if start_h < end_h:
                    self._days_from = float(start_h if self._days_from is None
                                            else min(self._days_from, start_h))
                self._hours_from = float(max(start_h, end_h))
                self._set_state("hours_from", self._hours_from)
            if self._days_from is not None:
                start_d = int(self._days_from) // DAY * DAY
                end_d = end_h // DAY * DAY  # the current day is not complete
                if start_d < end_d:
                    db.execute(
                        "INSERT OR REPLACE INTO daily SELECT series, t - t % 86400, sum(n), "
                        "min(min), sum(avg * n) / sum(n), max(max) FROM hourly "
                        "WHERE t >= ? AND t < ? GROUP BY series, t - t % 86400",
                        (start_d, end_d))
                    self._days_from = float(end_d)
                    self._set_state("days_from", self._days_from)
            db.execute("DELETE FROM poll WHERE t < ?", (raw_cut,))
            self._set_state("raw_cut", float(raw_cut))
            db.execute("DELETE FROM hourly WHERE t < ?", (now - int(self.hourly_s),))
            db.execute("DELETE FROM daily WHERE t < ?", (now - int(self.daily_s),))
            self._set_state("swept_until", float(now))
        self._next_sweep = now + self.sweep_every_s

    def _roll_hours(self, lo: int, hi: int) -> None:
        """Hourly n/min/avg/max of the raw polls in [lo, hi), grouped in numpy."""
        rows = self._db.execute("SELECT t, series, value FROM poll WHERE t >= ? AND t < ?",
                                (lo, hi)).fetchall()
        if not rows:
            return
        sid = np.concatenate([np.frombuffer(r[1], dtype=ID_DTYPE) for r in rows])
        val = np.concatenate([np.frombuffer(r[2], dtype=VALUE_DTYPE) for r in rows])
        t = np.repeat(np.array([r[0] for r in rows], dtype=np.int64),
                      [len(r[1]) // ID_DTYPE.itemsize for r in rows])
        hour = t - t % HOUR
        order = np.lexsort((hour, sid))
        sid, hour, val = sid[order], hour[order], val[order]
        edge = np.flatnonzero((np.diff(sid) != 0) | (np.diff(hour) != 0)) + 1
        starts = np.concatenate([[0], edge])
        n = np.diff(np.concatenate([starts, [sid.size]]))
        mins = np.minimum.reduceat(val, starts)
        maxs = np.maximum.reduceat(val, starts)
        means = np.add.reduceat(val, starts) / n
        self._db.executemany("INSERT OR REPLACE INTO hourly VALUES (?, ?, ?, ?, ?, ?)", zip(
            sid[starts].tolist(), hour[starts].tolist(), n.tolist(), mins.tolist(),
            means.tolist(), maxs.tolist(), strict=True))

    # -- reading --------------------------------------------------------------------
    def _id(self, device: str, port: str, lane: int, quantity: Quantity) -> int | None:
        return self._ids.get((device, port, lane, int(quantity)))

    def series(self, device: str, port: str, lane: int, quantity: Quantity,
               since: float | None = None, tier: Tier | None = None,
               hourly_first: bool = False) -> Series:
        """One quantity over time: the finest tier kept at each moment, or one ``tier``.

        Hourly and daily points are their bin's average, placed at the bin's middle.
        Without ``tier``: raw where raw samples are kept, hourly before that, daily
        before the hourly tier begins. ``hourly_first``: hourly wherever it exists and
        raw only after the last rolled-up hour, for estimators that bin to hours anyway
        (a tenth of the rows, none of the packed polls to cut open).
        """
        lo = -(2**62) if since is None else math.floor(since)
        with self._lock:
            sid = self._id(device, port, lane, quantity)
            if sid is None:
                return Series(np.empty(0), np.empty(0))
            db = self._db
            if tier is not None:
                got = self._tier(sid, device, tier, lo, 2**62)
            else:
                raw_from = db.execute("SELECT min(t) FROM poll WHERE device = ?",
                                      (device,)).fetchone()[0]
                hourly_from = db.execute("SELECT min(t) FROM hourly WHERE series = ?",
                                         (sid,)).fetchone()[0]
                raw_from = 2**62 if raw_from is None else int(raw_from)
                if hourly_first and hourly_from is not None:
                    (last,) = db.execute("SELECT max(t) FROM hourly WHERE series = ?",
                                         (sid,)).fetchone()
                    raw_from = int(last) + HOUR
                hourly_from = raw_from if hourly_from is None else int(hourly_from)
                got = (self._tier(sid, device, "daily", lo, min(hourly_from, raw_from) - DAY + 1)
                       + self._tier(sid, device, "hourly", lo, raw_from - HOUR + 1)
                       + self._tier(sid, device, "raw", max(lo, raw_from), 2**62))
        arr = np.asarray(got, dtype=np.float64).reshape(-1, 2)
        return Series(np.ascontiguousarray(arr[:, 0]), np.ascontiguousarray(arr[:, 1]))

    def _tier(self, sid: int, device: str, tier: Tier, lo: int, hi: int
              ) -> list[tuple[float, float]]:
        """Rows of one tier whose bins start in [lo, hi), as (time, value)."""
        if tier == "raw":
            return self._raw(sid, device, lo, hi)
        half = (HOUR if tier == "hourly" else DAY) // 2
        q = (f"SELECT t + {half}, avg FROM {tier} WHERE series = ? AND t >= ? AND t < ? "
             "ORDER BY t")
        rows: list[tuple[float, float]] = self._db.execute(q, (sid, lo, hi)).fetchall()
        return rows

    def _raw(self, sid: int, device: str, lo: int, hi: int) -> list[tuple[float, float]]:
        """One series out of its device's polls.

        SQLite cuts the 8 bytes out of each poll whose layout (series ids) is the
        device's latest, so only those cross into Python; polls of an older layout (a
        module fitted or pulled since) are searched one by one.
        """
        db = self._db
        last = db.execute("SELECT series FROM poll WHERE device = ? ORDER BY t DESC LIMIT 1",
                          (device,)).fetchone()
        if last is None:
            return []
        hit = np.flatnonzero(np.frombuffer(last[0], dtype=ID_DTYPE) == sid)
        pos = int(hit[0]) if hit.size else -1
        size = VALUE_DTYPE.itemsize
        out: list[tuple[int, bytes]] = []
        for t, same, cut in db.execute(
                "SELECT t, series = ?1, substr(value, ?2, ?3) FROM poll "
                "WHERE device = ?4 AND t >= ?5 AND t < ?6 ORDER BY t",
                (last[0], pos * size + 1, size, device, lo, hi)):
            if same and pos >= 0:
                out.append((t, cut))
                continue
            if same:
                continue
            ids, values = db.execute("SELECT series, value FROM poll WHERE device = ? AND t = ?",
                                     (device, t)).fetchone()
            found = np.flatnonzero(np.frombuffer(ids, dtype=ID_DTYPE) == sid)
            if found.size:
                out.append((t, values[int(found[0]) * size:(int(found[0]) + 1) * size]))
        if not out:
            return []
        times = [t for t, _ in out]
        vals = np.frombuffer(b"".join(v for _, v in out), dtype=VALUE_DTYPE).tolist()
        return list(zip(times, vals, strict=True))

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
            got = {t: int(self._db.execute(f"SELECT count(*) FROM {t}").fetchone()[0])
                   for t in ("series", "poll", "hourly", "daily", "baseline")}
            (raw_bytes,) = self._db.execute("SELECT sum(length(value)) FROM poll").fetchone()
        got["raw"] = int(raw_bytes or 0) // VALUE_DTYPE.itemsize
        return got
