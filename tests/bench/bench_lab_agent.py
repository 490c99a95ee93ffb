"""Benchmark (not a test): how fast the lab SNMP agent serves its sensor table.

Runs the agents in this process (their own thread) and walks with net-snmp's
``snmpbulkwalk`` in a subprocess, so this process's CPU time is the agent's cost.

    .venv/bin/python tests/bench/bench_lab_agent.py [--device qm-core-a] [--rounds 5]
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import time

from lightwarden.fixtures.lab.model import (
    LAB_COMMUNITY,
    LAB_V3_AUTH_KEY,
    LAB_V3_PRIV_KEY,
    LAB_V3_USER,
    Lab,
    LabClock,
)
from lightwarden.fixtures.lab.snmp_agent import LabSnmpAgent

SENSOR = "1.3.6.1.2.1.99.1.1.1"
CREDS = {
    "v2c": ["-v2c", "-c", LAB_COMMUNITY],
    "v3 SHA-256/AES": ["-v3", "-l", "authPriv", "-u", LAB_V3_USER, "-a", "SHA-256",
                       "-A", LAB_V3_AUTH_KEY, "-x", "AES", "-X", LAB_V3_PRIV_KEY],
}


def walk(port: int, creds: list[str], oid: str, reps: int) -> tuple[int, float, float]:
    """(varbinds, wall seconds, agent CPU seconds) of one snmpbulkwalk."""
    cpu0, wall0 = time.process_time(), time.perf_counter()
    done = subprocess.run(["snmpbulkwalk", *creds, "-On", "-Oq", f"-Cr{reps}", "-t", "5",
                           f"127.0.0.1:{port}", oid], capture_output=True, text=True, check=True)
    wall, cpu = time.perf_counter() - wall0, time.process_time() - cpu0
    return len(done.stdout.splitlines()), wall, cpu


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--device", default="qm-core-a")
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--reps", type=int, default=50, help="GETBULK max-repetitions")
    args = ap.parse_args()
    if shutil.which("snmpbulkwalk") is None:
        print("snmpbulkwalk not found (Debian package 'snmp')", file=sys.stderr)
        return 2
    lab = Lab.load()
    t0 = time.perf_counter()
    agent = LabSnmpAgent(lab, LabClock(lab.epoch, speed=60.0))
    agent.start()
    print(f"start-up of {len(agent.ports)} agents: {time.perf_counter() - t0:.2f} s")
    try:
        port = agent.ports[args.device]
        sensors = agent.tables[args.device].sensor_count
        print(f"{args.device}: {sensors} sensors, max-repetitions {args.reps}, "
              f"best of {args.rounds}")
        cases = [("whole sensor table", SENSOR), ("value column", f"{SENSOR}.4"),
                 ("status column", f"{SENSOR}.5")]
        per_vb: dict[str, float] = {}
        for label, creds in CREDS.items():
            for what, oid in cases:
                runs = [walk(port, creds, oid, args.reps) for _ in range(args.rounds)]
                n, wall, cpu = min(runs, key=lambda r: r[1])
                per_vb[label] = min(per_vb.get(label, 1.0), cpu / max(n, 1))
                print(f"  {label:15s} {what:19s} {n:5d} varbinds  wall {wall * 1e3:7.1f} ms  "
                      f"agent CPU {cpu * 1e3:7.1f} ms  ({cpu / max(n, 1) * 1e6:5.0f} us/varbind)")
        total = sum(t.sensor_count for t in agent.tables.values())
        for label, cost in per_vb.items():
            print(f"whole lab poll ({total} sensors, value + status) over {label}: "
                  f"~{2 * total * cost:.2f} agent CPU-seconds")
    finally:
        agent.stop()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
