"""Benchmark: one poll cycle of a 10^5-optic fleet through rules and exporters.

Not a test: run `python tests/bench/bench_pipeline.py [--optics N] [--per-device M]`. It builds
synthetic batches (per device, as the collector would), then times each stage of
`Monitor.handle`: window resolution + margins + held conditions (`assess`), alert
lifecycle, consistency findings of the device's ports and spans (devices are paired
port to port over a synthetic plant) with their alerts, Prometheus rendering, and the
check/status rows; second and later cycles show
the steady state (resolver and tracker caches warm). Prints figures and ratios.
"""

from __future__ import annotations

import argparse
import random
import time
import tracemalloc

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, PollOutcome, Quantity
from lightwarden.exporters.pages.rows import optic_rows
from lightwarden.exporters.prometheus.exposition import Exposition
from lightwarden.rules.assess import MarginTargets, assess
from lightwarden.rules.catalogue import default_catalogue
from lightwarden.rules.consistency import check_optic, check_spans, spans_by_device
from lightwarden.rules.hysteresis import ConditionTracker
from lightwarden.rules.lifecycle import AlertLifecycle
from lightwarden.rules.link_alerts import LinkAlerts
from lightwarden.rules.plant import Plant
from lightwarden.rules.spanloss import PlantSpan
from lightwarden.rules.windows import WindowResolver

PMDS = ["10GBASE-LR", "10GBASE-SR", "1000BASE-LX", "10GBASE-ER", "100GBASE-LR4"]
NM = {"10GBASE-LR": 1310.0, "10GBASE-SR": 850.0, "1000BASE-LX": 1310.0, "10GBASE-ER": 1550.0,
      "100GBASE-LR4": 1304.6}


def make_plant(devices: int, per_device: int) -> Plant:
    """Device 2k's port p faces device 2k+1's port p; SR spans on OM4, the rest OS2."""
    spans = []
    for d in range(0, devices - 1, 2):
        for p in range(per_device):
            pmd = PMDS[p % len(PMDS)]
            spans.append(PlantSpan(f"sw{d:05d}", f"sfp{p + 1}", f"sw{d + 1:05d}", f"sfp{p + 1}",
                                   0.2 if pmd.endswith("SR") else 4.0,
                                   "OM4" if pmd.endswith("SR") else "OS2", NM[pmd]))
    return Plant(spans, {})


def make_batch(device: str, optics: int, t: float, rng: random.Random):
    b = BatchBuilder(device)
    for p in range(optics):
        pmd = PMDS[p % len(PMDS)]
        lanes = 4 if pmd.endswith("LR4") else 1
        # One optic in 500 is fitted with the wrong PMD's wavelength: a few findings.
        nm = NM[pmd] if rng.random() > 0.002 else 1550.0
        o = b.add_optic(OpticIdentity(device=device, port=f"sfp{p + 1}", pmd=pmd, lanes=lanes,
                                      admin_up=True, serial=f"S{device}{p}", wavelength_nm=nm))
        for lane in range(1, lanes + 1):
            # Most receivers sit comfortably inside their window; a few do not.
            rx = rng.gauss(-5.0, 1.5) if rng.random() > 0.02 else rng.uniform(-16, 1)
            b.add(o, lane, Quantity.RX_POWER, rx)
            b.add(o, lane, Quantity.TX_POWER, rng.uniform(-4, 1))
            b.add(o, lane, Quantity.BIAS, rng.uniform(5, 60))
        b.add(o, 0, Quantity.TEMPERATURE, rng.uniform(25, 60))
        b.add(o, 0, Quantity.SUPPLY, rng.uniform(3.2, 3.4))
    return b.build(t)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--optics", type=int, default=100_000)
    ap.add_argument("--per-device", type=int, default=48)
    ap.add_argument("--cycles", type=int, default=3)
    ap.add_argument("--memory", action="store_true",
                    help="trace Python allocations too (slows every stage several-fold)")
    args = ap.parse_args()
    rng = random.Random(7)
    devices = max(1, args.optics // args.per_device)
    resolver = WindowResolver(default_catalogue())
    tracker = ConditionTracker()
    lifecycle = AlertLifecycle()
    expo = Exposition(margin_target_overload_db=1.0, margin_target_sensitivity_db=3.0)
    targets = MarginTargets()
    catalogue = default_catalogue()
    spans_of = spans_by_device(make_plant(devices, args.per_device))
    identities: dict[str, dict[str, OpticIdentity]] = {}
    links = LinkAlerts()
    if args.memory:
        tracemalloc.start()
    t0 = 1_780_000_000.0
    for cycle in range(args.cycles):
        now = t0 + cycle * 60
        batches = [make_batch(f"sw{d:05d}", args.per_device, now, rng) for d in range(devices)]
        rows = sum(len(b) for b in batches)
        stage = dict.fromkeys(("assess", "lifecycle", "links", "render", "rows"), 0.0)
        # "rows" (the wide check/status rows) runs on demand, not per poll; shown for scale.
        events = 0
        for b in batches:
            s = time.perf_counter()
            a = assess(b, targets=targets, tracker=tracker, now=now, resolver=resolver)
            stage["assess"] += time.perf_counter() - s
            s = time.perf_counter()
            events += len(lifecycle.observe(a, now))
            stage["lifecycle"] += time.perf_counter() - s
            s = time.perf_counter()  # as Monitor._check_links does per poll
            own = identities[b.device] = {o.port: o for o in b.optics}
            found = [f for o in own.values() for f in check_optic(o, catalogue)]
            found += check_spans(spans_of.get(b.device, ()),
                                 lambda d, p: identities.get(d, {}).get(p), catalogue)
            events += len(links.observe(found, {b.device}, now))
            stage["links"] += time.perf_counter() - s
            s = time.perf_counter()
            expo.update(PollOutcome(b.device, now, 0.1, b), a)
            stage["render"] += time.perf_counter() - s
            s = time.perf_counter()
            optic_rows(a)
            stage["rows"] += time.perf_counter() - s
        s = time.perf_counter()
        body = expo.body()
        scrape = time.perf_counter() - s
        total = sum(stage.values())
        print(f"cycle {cycle}: {devices} devices, {devices * args.per_device} optics, "
              f"{rows} rows, {events} alert events")
        for k, v in stage.items():
            print(f"  {k:<9} {v:7.2f} s  {1e6 * v / rows:6.2f} us/row  {100 * v / total:5.1f} %")
        print(f"  total     {total:7.2f} s per poll cycle of the whole fleet "
              f"({1e3 * total / devices:.2f} ms per device poll)")
        print(f"  scrape    {scrape:7.2f} s to assemble {len(body) / 2**20:.1f} MiB")
    if args.memory:
        current, peak = tracemalloc.get_traced_memory()
        print(f"python heap: {current / 2**20:.0f} MiB now, {peak / 2**20:.0f} MiB peak")


if __name__ == "__main__":
    main()
