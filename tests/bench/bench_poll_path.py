"""Benchmark (not a test): CPU per varbind of a steady SNMPv2c poll, ours against net-snmp.

One net-snmp snmpd serves a fictional 48-port switch (672 sensors, tests/support/
snmpd_switch.py). In the same run, on the same agent and columns, it measures:

- net-snmp ``snmpbulkwalk`` (C): marginal CPU per varbind, from a small and a large walk
  (children's CPU from getrusage, so process start-up cancels out);
- our fast path: ``FastSession.walk_columns`` alone, and a whole ``SnmpSource`` steady
  poll (marks GET, walk, RFC 3433 conversion, batch);
- discovery (pysnmp, tree first; per varbind the agent sent, overshoot included);
- the same source on pysnmp (``fast_path=False``), over v2c and v3 authPriv (the
  difference is what pysnmp's USM costs), and stock pysnmp ``bulk_walk_cmd``.

Each figure is the median of ``--runs`` runs (at least 3). This process's CPU time is the
manager's alone: the agent is another process.

    .venv/bin/python tests/bench/bench_poll_path.py [--runs 5] [--polls 20] [--json]
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from support.snmpd import SnmpdAgent, start_snmpd
from support.snmpd_switch import switch_dataset

from lightwarden.collector.snmp import EnginePool, SnmpCredentials, SnmpSource
from lightwarden.collector.snmp.fast import FastSession, SocketPool
from lightwarden.collector.snmp.inventory import (
    IF_STATUS_COLUMNS,
    SENSOR_LIVE_COLUMNS,
)

LIVE = (*SENSOR_LIVE_COLUMNS, *IF_STATUS_COLUMNS)
SMALL = "1.3.6.1.2.1.2.2.1.7"  # ifAdminStatus: 48 varbinds
LARGE = "1.3.6.1.2.1.99.1.1.1"  # the whole sensor table: 672 x 6 varbinds
REPS = 25


def child_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def snmpbulkwalk(agent: SnmpdAgent, oid: str) -> tuple[int, float]:
    before = child_cpu()
    done = subprocess.run(
        ["snmpbulkwalk", *agent.v2c_args(), f"-Cr{REPS}", "-On", "-Oq", "-M", "/dev/null",
         agent.address, oid],
        capture_output=True, text=True, check=True, env={**os.environ, "MIBS": ""},
    )  # fmt: skip
    return len(done.stdout.splitlines()), child_cpu() - before


def net_snmp_marginal(agent: SnmpdAgent, repeat: int = 5) -> float:
    """µs of CPU per varbind beyond process start-up (medians of ``repeat`` walks each)."""
    small = [snmpbulkwalk(agent, SMALL) for _ in range(repeat)]
    large = [snmpbulkwalk(agent, LARGE) for _ in range(repeat)]
    n_small, n_large = small[0][0], large[0][0]
    cpu_small = statistics.median(c for _, c in small)
    cpu_large = statistics.median(c for _, c in large)
    return (cpu_large - cpu_small) / (n_large - n_small) * 1e6


async def fast_walks(agent: SnmpdAgent, polls: int) -> float:
    pool = SocketPool()
    try:
        session = FastSession(pool, SnmpCredentials.v2c(agent.community), "127.0.0.1",
                              agent.port, max_repetitions=REPS)  # fmt: skip
        await session.walk_columns(LIVE, "warm-up")
        varbinds, start = 0, time.process_time()
        for _ in range(polls):
            got = await session.walk_columns(LIVE, "live columns")
            varbinds += sum(len(col) for col in got.values())
        return (time.process_time() - start) / varbinds * 1e6
    finally:
        pool.close()


async def source_polls(agent: SnmpdAgent, polls: int, fast: bool, v3: bool = False,
                       ) -> tuple[float, float, int]:  # fmt: skip
    """(µs per varbind of a steady poll, µs per varbind of discovery, varbinds per poll)."""
    engines, sockets = EnginePool(), SocketPool()
    creds = (SnmpCredentials.v3(agent.v3user, agent.authkey, agent.privkey, "SHA", "AES-128")
             if v3 else SnmpCredentials.v2c(agent.community))  # fmt: skip
    try:
        source = SnmpSource("qm-agg-48", "127.0.0.1", creds,
                            port=agent.port, engines=engines, sockets=sockets,
                            max_repetitions=REPS, fast_path=fast,
                            pmd_names=("100GBASE-LR4",))  # fmt: skip
        start = time.process_time()
        first = await source.poll(0.0)
        discovery_cpu = time.process_time() - start
        assert first.ok, first.error
        optics = len(first.batch.optics)
        # marks GET (2) + sensor value/status + ifAdmin/ifOper per poll
        per_poll = 2 + 2 * len(first.batch) + 2 * optics
        # discovery: what the agent sent, GETBULK pages past a column's end included
        discovery_varbinds = source.varbinds
        start = time.process_time()
        for i in range(polls):
            outcome = await source.poll(float(i + 1))
            assert outcome.ok, outcome.error
        steady = (time.process_time() - start) / (polls * per_poll) * 1e6
        assert source.discoveries == 1
        return steady, discovery_cpu / discovery_varbinds * 1e6, per_poll
    finally:
        sockets.close()
        engines.close()


async def stock_pysnmp(agent: SnmpdAgent, polls: int) -> float:
    from pysnmp.hlapi.v3arch.asyncio import (
        CommunityData,
        ContextData,
        ObjectIdentity,
        ObjectType,
        SnmpEngine,
        UdpTransportTarget,
        bulk_walk_cmd,
    )

    engine = SnmpEngine()
    target = await UdpTransportTarget.create(("127.0.0.1", agent.port), timeout=3, retries=1)
    auth = CommunityData(agent.community, mpModel=1)
    varbinds, start = 0, 0.0
    try:
        for round_ in range(polls + 1):
            if round_ == 1:
                varbinds, start = 0, time.process_time()
            for column in LIVE:
                async for ind, status, _, vbs in bulk_walk_cmd(
                    engine, auth, target, ContextData(), 0, REPS,
                    ObjectType(ObjectIdentity(column)), lexicographicMode=False,
                ):  # fmt: skip
                    if ind or status:
                        raise RuntimeError(f"stock walk failed: {ind or status}")
                    varbinds += len(vbs)
        return (time.process_time() - start) / varbinds * 1e6
    finally:
        engine.close_dispatcher()


def machine() -> str:
    cores = os.cpu_count()
    return f"{platform.machine()}, {cores} cores, Python {platform.python_version()}"


def rmem_max() -> int | None:
    try:
        return int(Path("/proc/sys/net/core/rmem_max").read_text())
    except (OSError, ValueError):
        return None


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--polls", type=int, default=20, help="steady polls per run")
    ap.add_argument("--ports", type=int, default=48)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    runs = max(3, args.runs)
    with tempfile.TemporaryDirectory() as tmp:
        agent = start_snmpd(Path(tmp), dataset=switch_dataset(args.ports))
        try:
            figures: dict[str, list[float]] = {k: [] for k in (
                "net-snmp snmpbulkwalk (marginal)", "ours: walk_columns", "ours: steady poll",
                "ours: discovery (pysnmp)", "pysnmp path: steady poll",
                "pysnmp path, v3 SHA/AES: steady poll", "stock pysnmp bulk_walk_cmd")}  # fmt: skip
            per_poll = 0
            for _ in range(runs):
                figures["net-snmp snmpbulkwalk (marginal)"].append(net_snmp_marginal(agent))
                figures["ours: walk_columns"].append(asyncio.run(fast_walks(agent, args.polls)))
                steady, discovery, per_poll = asyncio.run(source_polls(agent, args.polls, True))
                figures["ours: steady poll"].append(steady)
                figures["ours: discovery (pysnmp)"].append(discovery)
                slow, _, _ = asyncio.run(source_polls(agent, max(3, args.polls // 4), False))
                figures["pysnmp path: steady poll"].append(slow)
                v3, _, _ = asyncio.run(source_polls(agent, max(3, args.polls // 4), False, True))
                figures["pysnmp path, v3 SHA/AES: steady poll"].append(v3)
                figures["stock pysnmp bulk_walk_cmd"].append(
                    asyncio.run(stock_pysnmp(agent, max(2, args.polls // 10))))
        finally:
            agent.stop()
    medians = {name: statistics.median(values) for name, values in figures.items()}
    base = medians["net-snmp snmpbulkwalk (marginal)"]
    report = {
        "date": time.strftime("%Y-%m-%d"), "machine": machine(), "runs": runs,
        "ports": args.ports, "varbinds_per_poll": per_poll, "rmem_max": rmem_max(),
        "us_per_varbind": {k: round(v, 2) for k, v in medians.items()},
        "ratio_to_net_snmp": {k: round(v / base, 1) for k, v in medians.items()},
    }  # fmt: skip
    if args.json:
        print(json.dumps(report, indent=2))
        return 0
    print(f"{report['date']}  {report['machine']}  medians of {runs} runs, "
          f"{args.ports} ports, {per_poll} varbinds per steady poll")  # fmt: skip
    for name, value in medians.items():
        print(f"  {name:<36} {value:8.2f} µs/varbind  {value / base:6.1f}x net-snmp")
    steady = medians["ours: steady poll"]
    optics_per_min = 60e6 / (steady * per_poll) * args.ports
    print(f"  one core, steady polls only: about {optics_per_min:,.0f} optics per minute")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
