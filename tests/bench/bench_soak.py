"""Soak: a running monitor's memory and open files over time. Not a test.

    python tests/bench/bench_soak.py [--seconds 180] [--interval 2]

Starts `lightwarden demo` (the lab and the monitor in one process, state in a temporary
directory, no backfill), waits for its first polls, then samples the process's resident
memory (VmRSS) and open file descriptors every 10 s, scraping /metrics and /api/optics
between samples as Prometheus and a browser would. Prints the samples and the change
from the first to the last; flat means no leak.
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import tempfile
import time
import urllib.request

_URL = re.compile(r"metrics: (http://\S+)/metrics")


def rss_kib(pid: int) -> int:
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    return 0


def fds(pid: int) -> int:
    return len(os.listdir(f"/proc/{pid}/fd"))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=180.0)
    ap.add_argument("--interval", type=float, default=2.0)
    args = ap.parse_args()
    opener = urllib.request.build_opener(urllib.request.ProxyHandler({}))
    with tempfile.TemporaryDirectory() as tmp:
        proc = subprocess.Popen(
            [sys.executable, "-m", "lightwarden.exporters.app.cli", "demo", "--port", "0",
             "--interval", f"{args.interval:g}", "--backfill-days", "0", "--state-dir", tmp,
             "--duration", f"{args.seconds + 60:g}"],
            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        assert proc.stdout is not None
        url = None
        for line in proc.stdout:
            m = _URL.search(line)
            if m:
                url = m.group(1)
                break
        assert url, "the demo did not print its URL"
        time.sleep(20)  # first polls, caches warm
        samples = []
        start = time.monotonic()
        while time.monotonic() - start < args.seconds:
            for path in ("/metrics", "/api/optics", "/"):
                opener.open(url + path, timeout=10).read()
            samples.append((time.monotonic() - start, rss_kib(proc.pid), fds(proc.pid)))
            time.sleep(10)
        proc.terminate()
        proc.wait(30)
    for t, rss, n in samples:
        print(f"{t:6.0f} s  rss {rss / 1024:7.1f} MiB  fds {n}")
    (t0, r0, f0), (t1, r1, f1) = samples[0], samples[-1]
    print(f"over {t1 - t0:.0f} s: rss {r0 / 1024:.1f} -> {r1 / 1024:.1f} MiB "
          f"({(r1 - r0) / 1024:+.1f}), fds {f0} -> {f1} ({f1 - f0:+d}); "
          f"max rss {max(s[1] for s in samples) / 1024:.1f} MiB")


if __name__ == "__main__":
    main()
