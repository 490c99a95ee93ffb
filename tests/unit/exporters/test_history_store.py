"""The history store: tiers against a brute-force roll-up, retention, baselines, migration,
unclean shutdown and kill -9 during writes.

Brute force is numpy over the very samples written (min, mean, max per hour and day);
integrity is SQLite's own `PRAGMA integrity_check`.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity, ReadingBatch
from lightwarden.exporters.store.history import BASELINE_POLLS, History, HistoryError

T0 = 1_800_000_000
DAY = 86400
HOUR = 3600


def _batch(t: float, rx: float, tx: float, bias: float, temp: float,
           serial: str = "QM-SN-0001", device: str = "qm-a", port: str = "sfp1"
           ) -> ReadingBatch:
    b = BatchBuilder(device)
    o = b.add_optic(OpticIdentity(device=device, port=port, pmd="10GBASE-LR", serial=serial))
    b.add(o, 1, Quantity.RX_POWER, rx)
    b.add(o, 1, Quantity.TX_POWER, tx)
    b.add(o, 1, Quantity.BIAS, bias)
    b.add(o, 0, Quantity.TEMPERATURE, temp)
    b.add(o, 0, Quantity.SUPPLY, 3.3)  # not an ageing quantity: not kept
    return b.build(t)


def _fill(h: History, start: int, days: float, step: int, seed: int = 1
          ) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = np.arange(start, start + int(days * DAY), step)
    rx = -6.0 + rng.normal(0.0, 0.3, t.size)
    for ti, v in zip(t.tolist(), rx.tolist(), strict=True):
        h.record(_batch(ti, v, -2.0, 30.0, 40.0), force=True)
    return t, rx


def _brute(t: np.ndarray, v: np.ndarray, width: int) -> dict[int, tuple[int, float, float, float]]:
    out: dict[int, tuple[int, float, float, float]] = {}
    bins = t - t % width
    for b in np.unique(bins):
        sel = v[bins == b]
        out[int(b)] = (sel.size, float(sel.min()), float(sel.mean()), float(sel.max()))
    return out


def test_hourly_and_daily_min_avg_max_equal_a_brute_force_roll_up(tmp_path: Path):
    # source: numpy min/mean/max over the written samples (brute force)
    h = History(tmp_path / "h.sqlite", every_s=1, keep_days=400, raw_days=2)
    start = T0 - T0 % DAY + 7 * HOUR + 13  # not aligned to an hour or a day
    t, rx = _fill(h, start, 5.0, 420)  # 5 days, one sample every 7 minutes
    now = int(t[-1]) + 2 * DAY + 1
    h.sweep(now)
    got_h = {int(r[0]): (int(r[1]), r[2], r[3], r[4])
             for r in h.summary("qm-a", "sfp1", 1, Quantity.RX_POWER, "hourly")}
    want_h = _brute(t, rx, HOUR)
    assert got_h.keys() == want_h.keys()
    for k, (n, lo, avg, hi) in want_h.items():
        assert got_h[k][0] == n
        assert got_h[k][1:] == pytest.approx((lo, avg, hi), abs=1e-12)
    got_d = {int(r[0]): (int(r[1]), r[2], r[3], r[4])
             for r in h.summary("qm-a", "sfp1", 1, Quantity.RX_POWER, "daily")}
    want_d = _brute(t, rx, DAY)
    assert got_d.keys() == want_d.keys()
    for k, (n, lo, avg, hi) in want_d.items():
        assert got_d[k][0] == n
        assert got_d[k][1:] == pytest.approx((lo, avg, hi), abs=1e-12)
    # raw samples older than raw_days are gone; the tiers still cover them
    assert h.counts()["raw"] == 0
    s = h.series("qm-a", "sfp1", 1, Quantity.RX_POWER)
    assert len(s) == len(want_h) and np.all(np.diff(s.times) > 0)
    h.close()


def test_series_takes_the_finest_tier_at_each_moment_and_temperature_is_kept(tmp_path: Path):
    h = History(tmp_path / "h.sqlite", every_s=1, keep_days=3, raw_days=1)
    start = T0 - T0 % DAY
    t, _ = _fill(h, start, 6.0, 900)
    now = int(t[-1]) + 1
    h.sweep(now)
    s = h.series("qm-a", "sfp1", 1, Quantity.RX_POWER)
    gaps = np.diff(s.times)
    assert gaps.min() >= 900 - 1e-9 and np.all(gaps > 0)
    raw = h.series("qm-a", "sfp1", 1, Quantity.RX_POWER, tier="raw")
    assert raw.times[0] >= now - DAY and np.all(np.isin(raw.times, s.times))
    daily = h.series("qm-a", "sfp1", 1, Quantity.RX_POWER, tier="daily")
    assert daily.times[0] in s.times  # the oldest days come from the daily tier
    temp = h.series("qm-a", "sfp1", 0, Quantity.TEMPERATURE)
    assert len(temp) == len(s) and np.allclose(temp.values, 40.0)
    assert h.series("qm-a", "sfp1", 0, Quantity.SUPPLY).values.size == 0
    h.close()


def test_retention_is_a_sweep_and_never_deletes_the_first_seen_baseline(tmp_path: Path):
    h = History(tmp_path / "h.sqlite", every_s=1, keep_days=2, raw_days=1, daily_days=3)
    start = T0 - T0 % DAY
    for i in range(BASELINE_POLLS + 3):  # the first five polls make the baseline
        h.record(_batch(start + i * 900, -5.0, -2.0 - 0.1 * i, 30.0 + i, 35.0 + i), force=True)
    h.record(_batch(start + 30 * DAY, -5.0, -4.0, 40.0, 50.0), force=True)
    h.sweep(start + 30 * DAY + 1)
    counts = h.counts()
    assert counts["hourly"] == 0 and counts["daily"] == 0  # all older than kept
    b = h.baseline("qm-a", "sfp1", 1)
    assert b is not None and b.serial == "QM-SN-0001" and b.t == start
    # source: arithmetic mean of the first five polls (by hand: 0..4 -> mean 2)
    assert b.tx_dbm == pytest.approx(-2.2) and b.bias_ma == pytest.approx(32.0)
    assert b.temperature_c == pytest.approx(37.0)
    # a new module in the port has its own baseline
    h.record(_batch(start + 31 * DAY, -5.0, -1.0, 20.0, 30.0, serial="QM-SN-0002"), force=True)
    nb = h.baseline("qm-a", "sfp1", 1)
    assert nb is not None and nb.serial == "QM-SN-0002" and nb.tx_dbm == pytest.approx(-1.0)
    h.close()
    reopened = History(tmp_path / "h.sqlite")
    again = reopened.baseline("qm-a", "sfp1", 1)
    assert again is not None and again.serial == "QM-SN-0002"
    reopened.close()


_V1 = """
CREATE TABLE reading (device TEXT NOT NULL, port TEXT NOT NULL, lane INTEGER NOT NULL,
    quantity INTEGER NOT NULL, t REAL NOT NULL, value REAL NOT NULL,
    PRIMARY KEY (device, port, lane, quantity, t)) WITHOUT ROWID;
CREATE TABLE rx_window (device TEXT NOT NULL, port TEXT NOT NULL, lane INTEGER NOT NULL,
    pmd TEXT NOT NULL, sensitivity REAL, overload REAL, source TEXT NOT NULL,
    t REAL NOT NULL, PRIMARY KEY (device, port, lane)) WITHOUT ROWID;
"""


def test_a_history_file_of_the_first_schema_is_migrated_and_keeps_its_samples(tmp_path: Path):
    path = tmp_path / "old.sqlite"
    db = sqlite3.connect(path)
    db.executescript(_V1)
    rows = [("qm-a", "sfp1", 1, int(Quantity.RX_POWER), float(T0 + i * 900), -5.0 - 0.01 * i)
            for i in range(200)]
    db.executemany("INSERT INTO reading VALUES (?, ?, ?, ?, ?, ?)", rows)
    db.execute("INSERT INTO rx_window VALUES ('qm-a', 'sfp1', 1, '10GBASE-LR', -14.4, 0.5, "
               "'pmd-table', ?)", (float(T0),))
    db.commit()
    db.close()
    h = History(path, keep_days=400, raw_days=400)
    s = h.series("qm-a", "sfp1", 1, Quantity.RX_POWER)
    assert len(s) == 200 and s.values[-1] == pytest.approx(-5.0 - 0.01 * 199)
    assert [w.pmd for w in h.rx_windows()] == ["10GBASE-LR"]
    h.close()
    version = sqlite3.connect(path).execute("PRAGMA user_version").fetchone()[0]
    assert version == 2


def test_a_newer_or_broken_file_is_refused_with_its_name(tmp_path: Path):
    newer = tmp_path / "newer.sqlite"
    db = sqlite3.connect(newer)
    db.execute("PRAGMA user_version = 99")
    db.close()
    with pytest.raises(HistoryError, match=r"newer\.sqlite.*newer lightwarden"):
        History(newer)
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"not a database at all" * 100)
    with pytest.raises(HistoryError, match=r"junk\.sqlite"):
        History(junk)


def test_an_unclean_shutdown_gets_a_quick_check_and_a_clean_one_does_not(tmp_path: Path):
    path = tmp_path / "h.sqlite"
    h = History(path)
    h.record(_batch(T0, -5.0, -2.0, 30.0, 40.0), force=True)
    h.close()
    assert not History(path).recovered  # closed cleanly: no check needed
    # (the History above is left open, as a crashed process would leave it)
    again = History(path)
    assert again.recovered and again.check() == []
    again.close()


_WRITER = r"""
import sys
from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity
from lightwarden.exporters.store.history import History
h = History(sys.argv[1], every_s=1, raw_days=400)
t = 1_800_000_000
for poll in range(10**9):
    b = BatchBuilder("qm-a")
    for p in range(48):
        o = b.add_optic(OpticIdentity(device="qm-a", port=f"sfp{p}", serial=f"SN{p}"))
        b.add(o, 1, Quantity.RX_POWER, -5.0)
        b.add(o, 1, Quantity.TX_POWER, -2.0)
        b.add(o, 1, Quantity.BIAS, 30.0)
        b.add(o, 0, Quantity.TEMPERATURE, 40.0)
    h.record(b.build(t + 60 * poll), force=True)
    print(poll, flush=True)
"""


@pytest.mark.slow
def test_kill_9_during_writes_leaves_a_sound_store_that_lost_at_most_the_poll_in_flight(
        tmp_path: Path):
    # source: SQLite's PRAGMA integrity_check (the database engine's own full check)
    path = tmp_path / "h.sqlite"
    proc = subprocess.Popen([sys.executable, "-c", _WRITER, str(path)],
                            stdout=subprocess.PIPE, text=True)
    assert proc.stdout is not None
    done = -1
    for line in proc.stdout:
        done = int(line)
        if done >= 300:
            break
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    h = History(path)
    assert h.recovered and h.check() == []
    polls = h.counts()["raw"] // (48 * 4)
    assert h.counts()["raw"] % (48 * 4) == 0  # no poll is half written
    assert polls >= done + 1  # every poll it reported done is there (one more may be)
    h.close()


def test_history_check_command(tmp_path: Path, capsys: pytest.CaptureFixture[str]):
    import yaml

    from lightwarden.exporters.app.cli import main

    path = tmp_path / "h.sqlite"
    h = History(path)
    h.record(_batch(T0, -5.0, -2.0, 30.0, 40.0), force=True)
    h.close()
    site = tmp_path / "site.yaml"
    site.write_text(yaml.safe_dump({"history": {"path": str(path)}}))
    assert main(["history", "check", "-c", str(site)]) == 0
    assert "ok; series 4" in capsys.readouterr().out
    # the page headers after the first overwritten: the check (or the open) reports it
    data = bytearray(path.read_bytes())
    for page in range(4096, len(data), 4096):
        data[page:page + 8] = b"\xff" * 8
    path.write_bytes(bytes(data))
    assert main(["history", "check", "-c", str(site)]) == 1
    err = capsys.readouterr().err
    assert "h.sqlite" in err and "Traceback" not in err


def test_hourly_first_reads_the_hourly_tier_and_only_the_unrolled_tail_raw(tmp_path: Path):
    h = History(tmp_path / "h.sqlite", every_s=1, raw_days=14)
    start = T0 - T0 % DAY
    t, _ = _fill(h, start, 2.0, 900)
    h.sweep(int(t[-1]) + 1)  # every hour but the last one is rolled up
    s = h.series("qm-a", "sfp1", 1, Quantity.RX_POWER, hourly_first=True)
    hourly = h.summary("qm-a", "sfp1", 1, Quantity.RX_POWER, "hourly")
    n_h = hourly.shape[0]
    assert np.allclose(s.values[:n_h], hourly[:, 3]) and np.allclose(s.times[:n_h],
                                                                     hourly[:, 0] + 1800)
    tail = t[t >= hourly[-1, 0] + 3600]
    assert list(s.times[n_h:]) == list(tail.astype(float))
    full = h.series("qm-a", "sfp1", 1, Quantity.RX_POWER)
    assert len(full) == t.size  # without it: every raw sample
    h.close()


def test_each_sweep_rolls_up_only_the_hours_since_the_last(tmp_path: Path,
                                                           monkeypatch: pytest.MonkeyPatch):
    h = History(tmp_path / "h.sqlite", every_s=1)
    calls: list[tuple[int, int]] = []
    real = h._roll_hours
    monkeypatch.setattr(h, "_roll_hours", lambda lo, hi: (calls.append((lo, hi)), real(lo, hi)))
    start = T0 - T0 % DAY
    for i in range(12 * 4):  # twelve hours at 15 minutes
        h.record(_batch(start + 900 * i, -5.0, -2.0, 30.0, 40.0), force=True)
    assert calls and all(hi - lo <= HOUR for lo, hi in calls)  # never the whole day again
    assert len(h.summary("qm-a", "sfp1", 1, Quantity.RX_POWER, "hourly")) == 11
    h.close()


def test_an_hour_written_before_a_restart_is_still_rolled_up(tmp_path: Path):
    path = tmp_path / "h.sqlite"
    start = T0 - T0 % DAY
    h = History(path, every_s=1)
    for i in range(6):  # 10:00 to 11:15, sweeping at the first sample only
        h.record(_batch(start + 10 * HOUR + 900 * i, -5.0, -2.0, 30.0, 40.0), force=True)
    h.close()
    again = History(path, every_s=1)
    again.record(_batch(start + 13 * HOUR, -5.0, -2.0, 30.0, 40.0), force=True)
    again.sweep(start + 13 * HOUR + 1)
    hours = again.summary("qm-a", "sfp1", 1, Quantity.RX_POWER, "hourly")[:, 0]
    assert list(hours) == [start + 10 * HOUR, start + 11 * HOUR]
    again.close()
