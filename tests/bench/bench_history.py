"""Benchmark: history ingest and the 90-day trend query of one optic.

Not a test: run `python tests/bench/bench_history.py [--optics N] [--cycles C]`.

Ingest: a fleet of N optics (48 per device, one lane each) polled every 900 s (the default
sample interval); each poll keeps Rx, Tx, bias and temperature (4 readings per optic).
Every cycle goes through `History.record`, including the hourly sweep whenever sample
time crosses it; figures are readings per second per cycle, the sweep's share separately.

Query: the store it builds holds the series of all N optics (4 per optic) with
`--filler-hours` hourly rows and `--filler-days` daily rows each, written straight into
the tiers (writing them through months of simulated polling would take hours), plus
`--probes` optics with a full 90 days as the tiers keep it by default: 14 days of raw
samples at 900 s, hourly min/avg/max for all 90 days (the sweep rolls every hour up).
The query is `History.series` for Rx power over 90 days (raw + hourly), and the same
hourly-first (what the drift gauges read), on probes in random order after reopening the
file; then the drift estimate on that series.
"""

from __future__ import annotations

import argparse
import random
import sqlite3
import tempfile
import time
from pathlib import Path

import numpy as np

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity, ReadingBatch
from lightwarden.exporters.store.history import History
from lightwarden.exporters.store.schema import pack_ids, pack_values
from lightwarden.rules.drift import drift

T0 = 1_800_000_000
DAY = 86_400
PER_DEVICE = 48


def fleet_batches(optics: int, t: float, rng: random.Random) -> list[ReadingBatch]:
    out = []
    for d in range((optics + PER_DEVICE - 1) // PER_DEVICE):
        dev = f"qm-sw-{d:05d}"
        b = BatchBuilder(dev)
        for p in range(min(PER_DEVICE, optics - d * PER_DEVICE)):
            o = b.add_optic(OpticIdentity(device=dev, port=f"sfp{p + 1}", serial=f"S{d}-{p}",
                                          pmd="10GBASE-LR"))
            b.add(o, 1, Quantity.RX_POWER, rng.gauss(-5.0, 1.0))
            b.add(o, 1, Quantity.TX_POWER, rng.gauss(-2.0, 0.5))
            b.add(o, 1, Quantity.BIAS, rng.gauss(30.0, 3.0))
            b.add(o, 0, Quantity.TEMPERATURE, rng.gauss(40.0, 3.0))
            b.add(o, 0, Quantity.SUPPLY, 3.3)
        out.append(b.build(t))
    return out


def bench_ingest(path: Path, optics: int, cycles: int) -> None:
    rng = random.Random(1)
    h = History(path)
    print(f"ingest: {optics} optics, {cycles} cycles of 900 s, 4 readings per optic")
    for c in range(cycles):
        t = T0 + 900 * c + 1800  # the third cycle crosses an hour: a sweep runs
        batches = fleet_batches(optics, t, rng)  # built outside the timing, as polls are
        swept_before = h._next_sweep
        start = time.perf_counter()
        n = sum(h.record(b) for b in batches)
        el = time.perf_counter() - start
        sweep = " (includes the sweep)" if h._next_sweep != swept_before else ""
        print(f"  cycle {c + 1}: {n} readings in {el:.2f} s = {n / el:,.0f} readings/s{sweep}")
    start = time.perf_counter()
    h.sweep(T0 + 900 * cycles + 3 * 3600)
    print(f"  a sweep on its own: {time.perf_counter() - start:.2f} s")
    print(f"  file {path.stat().st_size / 2**20:.0f} MiB, rows {h.counts()}")
    h.close()


def build_query_store(path: Path, optics: int, probes: int, filler_hours: int,
                      filler_days: int) -> list[tuple[str, str]]:
    h = History(path)
    h.close()
    db = sqlite3.connect(path)
    db.execute("PRAGMA journal_mode=WAL")
    db.execute("PRAGMA synchronous=OFF")
    now = T0 + 90 * DAY
    rng = np.random.default_rng(2)
    sid = 0
    probe_keys = []
    start = time.perf_counter()
    with db:
        series_rows = []
        for d in range((optics + PER_DEVICE - 1) // PER_DEVICE):
            for p in range(min(PER_DEVICE, optics - d * PER_DEVICE)):
                for lane, q in ((1, Quantity.RX_POWER), (1, Quantity.TX_POWER),
                                (1, Quantity.BIAS), (0, Quantity.TEMPERATURE)):
                    sid += 1
                    series_rows.append((sid, f"qm-sw-{d:05d}", f"sfp{p + 1}", lane, int(q)))
        db.executemany("INSERT INTO series VALUES (?, ?, ?, ?, ?)", series_rows)
        hours = now - 14 * DAY - 3600 * np.arange(filler_hours, 0, -1)
        days = (now - 90 * DAY) // DAY * DAY - DAY * np.arange(filler_days, 0, -1)
        for lo in range(1, sid + 1, 20_000):
            ids = np.arange(lo, min(lo + 20_000, sid + 1))
            ht = np.repeat(ids, hours.size), np.tile(hours, ids.size)
            v = rng.normal(-5.0, 0.5, ht[0].size)
            db.executemany("INSERT INTO hourly VALUES (?, ?, 4, ?, ?, ?)",
                           zip(ht[0].tolist(), ht[1].tolist(), (v - 0.1).tolist(), v.tolist(),
                               (v + 0.1).tolist(), strict=True))
            dt = np.repeat(ids, days.size), np.tile(days, ids.size)
            v = rng.normal(-5.0, 0.5, dt[0].size)
            db.executemany("INSERT INTO daily VALUES (?, ?, 96, ?, ?, ?)",
                           zip(dt[0].tolist(), dt[1].tolist(), (v - 0.3).tolist(), v.tolist(),
                               (v + 0.3).tolist(), strict=True))
        # the probes: a full 90 days, raw for the last 14 and hourly before
        pick = random.Random(3).sample(range(0, sid, 4 * PER_DEVICE), probes)  # one a device
        pick = [p + 4 * random.Random(p).randrange(PER_DEVICE) for p in pick]
        raw_t = np.arange(now - 14 * DAY, now, 900)
        # the sweep keeps hourly rows over the raw period too (raw is dropped after 14 days)
        hour_t = np.arange(now - 90 * DAY, now - 3600, 3600)
        for base in pick:
            rx_id = base + 1
            dev, port = series_rows[base][1], series_rows[base][2]
            probe_keys.append((dev, port))
            db.execute("DELETE FROM hourly WHERE series = ?", (rx_id,))
            v = -5.0 - 0.01 * (hour_t - hour_t[0]) / DAY
            db.executemany("INSERT INTO hourly VALUES (?, ?, 4, ?, ?, ?)",
                           [(rx_id, int(t), x - 0.1, x, x + 0.1)
                            for t, x in zip(hour_t.tolist(), v.tolist(), strict=True)])
            # raw polls of the probe's whole device (48 optics x 4 series per poll)
            first = rx_id - 4 * int(port.removeprefix("sfp")) + 4
            ids = pack_ids(np.arange(first, first + 4 * PER_DEVICE))
            v = -5.0 - 0.01 * (raw_t - hour_t[0]) / DAY + rng.normal(0, 0.05, raw_t.size)
            polls = []
            for t, x in zip(raw_t.tolist(), v.tolist(), strict=True):
                vals = rng.normal(-5.0, 0.5, 4 * PER_DEVICE)
                vals[rx_id - first] = x
                polls.append((dev, int(t), ids, pack_values(vals)))
            db.executemany("INSERT OR REPLACE INTO poll (device, t, series, value) "
                           "VALUES (?, ?, ?, ?)", polls)
    db.close()
    el = time.perf_counter() - start
    print(f"query store: {optics} optics ({sid} series), {filler_hours} hourly + "
          f"{filler_days} daily rows each, {probes} probes with 90 days; built in {el:.0f} s, "
          f"{path.stat().st_size / 2**20:.0f} MiB")
    return probe_keys


def bench_query(path: Path, probes: list[tuple[str, str]]) -> None:
    h = History(path, raw_days=14)
    now = T0 + 90 * DAY
    q_ms, d_ms, hq_ms, n = [], [], [], 0
    for dev, port in random.Random(4).sample(probes, len(probes)):
        start = time.perf_counter()
        s = h.series(dev, port, 1, Quantity.RX_POWER, now - 90 * DAY)
        q_ms.append((time.perf_counter() - start) * 1000)
        n = len(s)
        start = time.perf_counter()
        h.series(dev, port, 1, Quantity.RX_POWER, now - 90 * DAY, hourly_first=True)
        hq_ms.append((time.perf_counter() - start) * 1000)
        start = time.perf_counter()
        drift(s.times, s.values, now)
        d_ms.append((time.perf_counter() - start) * 1000)
    h.close()
    print(f"90-day Rx series of one optic ({n} points: raw 14 days + hourly before): "
          f"median {np.median(q_ms):.1f} ms, worst {max(q_ms):.1f} ms over {len(q_ms)} optics")
    print(f"drift estimate on it: median {np.median(d_ms):.1f} ms, worst {max(d_ms):.1f} ms")
    print(f"the same series hourly-first (what the drift gauges read): median "
          f"{np.median(hq_ms):.1f} ms, worst {max(hq_ms):.1f} ms")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--optics", type=int, default=100_000)
    ap.add_argument("--cycles", type=int, default=6)
    ap.add_argument("--probes", type=int, default=50)
    ap.add_argument("--filler-hours", type=int, default=12)
    ap.add_argument("--filler-days", type=int, default=4)
    ap.add_argument("--dir", default=None)
    ap.add_argument("--only", choices=("ingest", "query"), default=None)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(dir=args.dir) as tmp:
        if args.only != "query":
            bench_ingest(Path(tmp) / "ingest.sqlite", args.optics, args.cycles)
        if args.only == "ingest":
            return
        path = Path(tmp) / "query.sqlite"
        probes = build_query_store(path, args.optics, args.probes, args.filler_hours,
                                   args.filler_days)
        bench_query(path, probes)


if __name__ == "__main__":
    main()
