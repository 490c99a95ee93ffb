"""Reading history in SQLite: what trends, forecasts and "how fast is it moving" read.

Only the quantities that age (Rx power, Tx power, bias) are kept, and at most one sample
per device every ``every_s`` seconds, so a year of a 10^5-optic fleet stays a few GB
rather than a few TB. Writes happen once per kept poll in one transaction; reads are by
(device, port, lane, quantity) over a time range, served by the primary key.
"""

from __future__ import annotations

import sqlite3
import threading
from pathlib import Path

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch, ReadingStatus
from lightwarden.rules.outlook import RxWindow, Series

KEPT = (int(Quantity.RX_POWER), int(Quantity.TX_POWER), int(Quantity.BIAS))

_SCHEMA = """
CREATE TABLE IF NOT EXISTS reading (
    device TEXT NOT NULL,
    port TEXT NOT NULL,
    lane INTEGER NOT NULL,
    quantity INTEGER NOT NULL,
    t REAL NOT NULL,
    value REAL NOT NULL,
    PRIMARY KEY (device, port, lane, quantity, t)
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
"""


class HistoryError(RuntimeError):
    pass


class History:
    """Thread-safe: the poller writes, the HTTP and report code read."""

    def __init__(self, path: str | Path, every_s: float = 900.0, keep_days: float = 400.0):
        self.path = Path(path)
        self.every_s = every_s
        self.keep_s = keep_days * 86400.0
        self._lock = threading.Lock()
        self._last_kept: dict[str, float] = {}
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._db = sqlite3.connect(str(self.path), check_same_thread=False)
            self._db.execute("PRAGMA journal_mode=WAL")
            self._db.execute("PRAGMA synchronous=NORMAL")
            self._db.executescript(_SCHEMA)
        except sqlite3.Error as exc:
            raise HistoryError(f"history {self.path}: {exc}") from None

    def close(self) -> None:
        with self._lock:
            self._db.close()

    def record(self, batch: ReadingBatch, windows: list[RxWindow] | None = None,
               force: bool = False) -> int:
        """Keep this batch's ageing quantities if the device's last kept one is old enough.

        ``windows`` (the Rx windows of this poll) replace the stored ones when kept.
        Returns how many reading rows were written (0 when skipped).
        """
        last = self._last_kept.get(batch.device)
        if not force and last is not None and batch.taken_at - last < self.every_s:
            return 0
        mask = (batch.status == ReadingStatus.OK) & np.isin(batch.quantity, KEPT)
        idx = np.flatnonzero(mask)
        if idx.size == 0:
            return 0
        rows = [
            (batch.device, batch.optics[int(batch.optic[i])].port, int(batch.lane[i]),
             int(batch.quantity[i]), batch.taken_at, float(batch.value[i]))
            for i in idx
        ]
        with self._lock:
            try:
                with self._db:
                    self._db.executemany(
                        "INSERT OR REPLACE INTO reading VALUES (?, ?, ?, ?, ?, ?)", rows
                    )
                    self._db.execute(
                        "DELETE FROM reading WHERE device = ? AND t < ?",
                        (batch.device, batch.taken_at - self.keep_s),
                    )
                    if windows:
                        self._db.executemany(
                            "INSERT OR REPLACE INTO rx_window VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                            [(w.device, w.port, w.lane, w.pmd, w.sensitivity, w.overload,
                              w.source, w.t) for w in windows],
                        )
            except sqlite3.Error as exc:
                raise HistoryError(f"history {self.path}: {exc}") from None
        self._last_kept[batch.device] = batch.taken_at
        return len(rows)

    def series(self, device: str, port: str, lane: int, quantity: Quantity,
               since: float | None = None) -> Series:
        q = ("SELECT t, value FROM reading WHERE device = ? AND port = ? AND lane = ? "
             "AND quantity = ? AND t >= ? ORDER BY t")
        with self._lock:
            got = self._db.execute(
                q, (device, port, lane, int(quantity), -1e18 if since is None else since)
            ).fetchall()
        arr = np.asarray(got, dtype=np.float64).reshape(-1, 2)
        return Series(arr[:, 0].copy(), arr[:, 1].copy())

    def keys(self) -> list[tuple[str, str, int, int]]:
        with self._lock:
            return [tuple(r) for r in self._db.execute(
                "SELECT DISTINCT device, port, lane, quantity FROM reading ORDER BY 1, 2, 3, 4"
            )]

    def rx_windows(self) -> list[RxWindow]:
        with self._lock:
            got = self._db.execute(
                "SELECT device, port, lane, pmd, sensitivity, overload, source, t "
                "FROM rx_window ORDER BY device, port, lane"
            ).fetchall()
        return [RxWindow(*row) for row in got]
