"""Benchmark of the Prometheus exposition at fleet scale (not a test).

    python tests/bench/bench_exposition.py [--optics 100000] [--per-device 40] \
        [--naive-optics 20000]

Builds a fictional fleet (Quillmoor Lab style names) where a quarter of the optics have
four lanes, renders every device once (as each poll would), then times what a scrape
costs: assembling the cached chunks, and gzip. Compares with the naive approach of one
prometheus_client labelled Gauge per family set sample by sample and rendered with
``generate_latest`` at scrape time (run on a smaller fleet and scaled per sample, because
at full size it is the slow, memory-hungry thing being avoided).
"""

from __future__ import annotations

import argparse
import gc
import statistics
import time
import tracemalloc

import numpy as np

from lightwarden.collector.readings import (
    BatchBuilder,
    OpticIdentity,
    PollOutcome,
    Quantity,
    ReadingBatch,
    ReadingStatus,
)
from lightwarden.exporters.prometheus.exposition import Exposition
from lightwarden.rules.findings import Assessment, Condition, WindowSource


def make_fleet(optics: int, per_device: int, seed: int = 7) -> list[tuple[PollOutcome, Assessment]]:
    rng = np.random.default_rng(seed)
    polls = []
    devices = (optics + per_device - 1) // per_device
    left = optics
    for d in range(devices):
        name = f"hg-sw-{d:05d}"
        b = BatchBuilder(name)
        for p in range(min(per_device, left)):
            quad = p % 4 == 3  # a quarter are 4-lane modules
            lanes = 4 if quad else 1
            o = b.add_optic(
                OpticIdentity(
                    device=name,
                    port=f"sfp{p + 1}",
                    alias=f"to hg-sw-{(d + 1) % devices:05d} sfp{p + 1}",
                    form_factor="QSFP28" if quad else "SFP+",
                    pmd="100GBASE-LR4" if quad else "10GBASE-LR",
                    wavelength_nm=1304.5 if quad else 1310.0,
                    lanes=lanes,
                    part_number="HGL-100LR4" if quad else "HGL-10LR",
                    serial=f"HG{d:05d}{p:03d}",
                )
            )
            for lane in range(1, lanes + 1):
                mw = 0.0 if rng.random() < 0.01 else float(rng.uniform(0.05, 1.2))
                b.add_power_mw(o, lane, Quantity.RX_POWER, mw)
                b.add_power_mw(o, lane, Quantity.TX_POWER, float(rng.uniform(0.4, 1.2)))
                b.add(o, lane, Quantity.BIAS, float(rng.uniform(5, 45)))
            b.add(o, 0, Quantity.TEMPERATURE, float(rng.uniform(20, 55)))
            b.add(o, 0, Quantity.SUPPLY, float(rng.uniform(3.2, 3.4)))
        left -= per_device
        batch = b.build(1_800_000_000.0)
        polls.append((PollOutcome(name, batch.taken_at - 1, 0.8, batch), assess(batch)))
    return polls


def assess(batch: ReadingBatch) -> Assessment:
    n = len(batch)
    rx = batch.quantity == Quantity.RX_POWER
    low = np.where(rx, -14.4, np.nan)
    high = np.where(rx, 0.5, np.nan)
    src = np.where(rx, int(WindowSource.PMD_TABLE), int(WindowSource.NONE)).astype(np.int8)
    cond = np.where(batch.status == ReadingStatus.NO_LIGHT, int(Condition.DARK), 0).astype(np.int8)
    worst = np.zeros(len(batch.optics), dtype=np.int8)
    np.maximum.at(worst, batch.optic, cond)
    nan = np.full(n, np.nan)
    return Assessment(
        batch=batch,
        low_edge=low,
        high_edge=high,
        low_warning=nan,
        high_warning=nan,
        window_source=src,
        margin_low_db=batch.value - low,
        margin_high_db=high - batch.value,
        instant=cond,
        condition=cond,
        optic_condition=worst,
    )


def ours(polls) -> dict[str, float]:
    exp = Exposition(margin_target_overload_db=3.0, margin_target_sensitivity_db=3.0)
    per_device = []
    t0 = time.perf_counter()
    for outcome, a in polls:
        t = time.perf_counter()
        exp.update(outcome, a)
        per_device.append(time.perf_counter() - t)
    render_total = time.perf_counter() - t0
    t = time.perf_counter()
    body = exp.body()
    assemble = time.perf_counter() - t
    t = time.perf_counter()
    exp.body()
    cached = time.perf_counter() - t
    t = time.perf_counter()
    gz = exp.body_gzip()
    gz_time = time.perf_counter() - t
    # a scrape after one device re-polled: re-assemble (the gzip would be redone too)
    exp.update(*polls[0])
    t = time.perf_counter()
    exp.body()
    reassemble = time.perf_counter() - t
    samples = body.count(b"\n") - 2 * body.count(b"# HELP ")
    return {
        "render_total_s": render_total,
        "render_device_median_ms": statistics.median(per_device) * 1e3,
        "render_device_max_ms": max(per_device) * 1e3,
        "assemble_s": assemble,
        "assemble_after_one_update_s": reassemble,
        "cached_body_s": cached,
        "gzip_l1_s": gz_time,
        "bytes": len(body),
        "gzip_bytes": len(gz),
        "samples": samples,
    }


def ours_memory(polls) -> float:
    gc.collect()
    tracemalloc.start()
    exp = Exposition()
    for outcome, a in polls:
        exp.update(outcome, a)
    exp.body()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / 2**20


def naive(polls, memory: bool) -> dict[str, float]:
    """One labelled Gauge per family, set per sample, rendered by generate_latest."""
    from prometheus_client import CollectorRegistry, Gauge, generate_latest

    if memory:
        gc.collect()
        tracemalloc.start()
    reg = CollectorRegistry()

    def gauge(name: str, *labels: str) -> Gauge:
        return Gauge(name, "h", list(labels), registry=reg)

    dpl = ("device", "port", "lane")
    g = {
        "rx": gauge("lightwarden_rx_power_dbm", *dpl, "pmd"),
        "tx": gauge("lightwarden_tx_power_dbm", *dpl, "pmd"),
        "bias": gauge("lightwarden_bias_amperes", *dpl),
        "temp": gauge("lightwarden_temperature_celsius", "device", "port"),
        "sup": gauge("lightwarden_supply_volts", "device", "port"),
        "ovl": gauge("lightwarden_rx_overload_dbm", *dpl, "window_source"),
        "sen": gauge("lightwarden_rx_sensitivity_dbm", *dpl, "window_source"),
        "mo": gauge("lightwarden_rx_margin_to_overload_db", *dpl),
        "ms": gauge("lightwarden_rx_margin_to_sensitivity_db", *dpl),
        "cond": gauge("lightwarden_optic_condition", "device", "port", "condition"),
        "sev": gauge("lightwarden_optic_severity", "device", "port"),
        "info": gauge(
            "lightwarden_optic_info", "device", "port", "pmd", "form_factor", "part_number",
            "serial", "wavelength_nm", "window_source", "alias",
        ),
    }  # fmt: skip
    t0 = time.perf_counter()
    for outcome, a in polls:
        b = outcome.batch
        dev = b.device
        for i in range(len(b)):
            opt = b.optics[int(b.optic[i])]
            q = int(b.quantity[i])
            lane = str(int(b.lane[i]))
            if int(b.status[i]) != 0:
                continue
            v = float(b.value[i])
            if q == Quantity.RX_POWER:
                g["rx"].labels(dev, opt.port, lane, opt.pmd).set(v)
                g["ovl"].labels(dev, opt.port, lane, "pmd-table").set(float(a.high_edge[i]))
                g["sen"].labels(dev, opt.port, lane, "pmd-table").set(float(a.low_edge[i]))
                g["mo"].labels(dev, opt.port, lane).set(float(a.margin_high_db[i]))
                g["ms"].labels(dev, opt.port, lane).set(float(a.margin_low_db[i]))
            elif q == Quantity.TX_POWER:
                g["tx"].labels(dev, opt.port, lane, opt.pmd).set(v)
            elif q == Quantity.BIAS:
                g["bias"].labels(dev, opt.port, lane).set(v / 1000)
            elif q == Quantity.TEMPERATURE:
                g["temp"].labels(dev, opt.port).set(v)
            else:
                g["sup"].labels(dev, opt.port).set(v)
        for o, opt in enumerate(b.optics):
            c = Condition(int(a.optic_condition[o]))
            g["cond"].labels(dev, opt.port, c.word).set(1)
            g["sev"].labels(dev, opt.port).set(c.severity)
            g["info"].labels(dev, opt.port, opt.pmd, opt.form_factor, opt.part_number, opt.serial,
                             "1310", "pmd-table", opt.alias).set(1)  # fmt: skip
    set_time = time.perf_counter() - t0
    t = time.perf_counter()
    body = generate_latest(reg)
    scrape = time.perf_counter() - t
    out = {"set_s": set_time, "scrape_s": scrape, "bytes": len(body),
           "samples": body.count(b"\n") - 2 * body.count(b"# HELP ")}  # fmt: skip
    if memory:
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        out["peak_mib"] = peak / 2**20
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--optics", type=int, default=100_000)
    ap.add_argument("--per-device", type=int, default=40)
    ap.add_argument("--naive-optics", type=int, default=20_000)
    args = ap.parse_args()

    polls = make_fleet(args.optics, args.per_device)
    rows = sum(len(o.batch) for o, _ in polls)
    print(f"fleet: {args.optics} optics, {len(polls)} devices x {args.per_device}, {rows} rows")
    r = ours(polls)
    mem = ours_memory(polls)
    print("cached exposition (render once per poll, join at scrape):")
    print(f"  samples                      {r['samples']}")
    print(f"  render, all devices          {r['render_total_s']:.2f} s")
    print(f"  render per device batch      median {r['render_device_median_ms']:.2f} ms,"
          f" max {r['render_device_max_ms']:.2f} ms")  # fmt: skip
    print(f"  assemble at scrape           {r['assemble_s'] * 1e3:.0f} ms (after a change:"
          f" {r['assemble_after_one_update_s'] * 1e3:.0f} ms; unchanged: "
          f"{r['cached_body_s'] * 1e6:.0f} us)")  # fmt: skip
    print(f"  gzip body at scrape          {r['gzip_l1_s'] * 1e3:.0f} ms (joins members"
          " compressed at render time)")  # fmt: skip
    print(f"  body                         {r['bytes'] / 2**20:.1f} MiB "
          f"(gzip {r['gzip_bytes'] / 2**20:.1f} MiB)")  # fmt: skip
    print(f"  bytes per sample             {r['bytes'] / r['samples']:.0f}")
    print(f"  peak traced memory           {mem:.0f} MiB")

    small = make_fleet(args.naive_optics, args.per_device)
    r_small = ours(small)
    mem_small = ours_memory(small)
    n = naive(small, memory=False)
    n_mem = naive(small, memory=True)["peak_mib"]
    print(f"naive labelled Gauges vs cached, {args.naive_optics} optics ({n['samples']} samples"
          f" naive, {r_small['samples']} ours):")  # fmt: skip
    print(f"  per poll:   set {n['set_s']:.2f} s vs render {r_small['render_total_s']:.2f} s"
          f"  ({n['set_s'] / r_small['render_total_s']:.1f}x)")  # fmt: skip
    print(
        f"  per scrape: generate_latest {n['scrape_s']:.2f} s vs assemble "
        f"{r_small['assemble_s'] * 1e3:.0f} ms ({n['scrape_s'] / r_small['assemble_s']:.0f}x)"
    )
    print(f"  peak memory {n_mem:.0f} MiB vs {mem_small:.0f} MiB ({n_mem / mem_small:.1f}x)")
    scale = args.optics / args.naive_optics
    print(f"  naive scaled to {args.optics} optics: scrape ~{n['scrape_s'] * scale:.1f} s,"
          f" memory ~{n_mem * scale:.0f} MiB")  # fmt: skip


if __name__ == "__main__":
    main()
