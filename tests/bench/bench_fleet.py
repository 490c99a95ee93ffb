"""Benchmark (not a test): a fleet of simulated SNMPv2c devices under the real scheduler.

net-snmp snmpd processes listen on N loopback ports (80 per process); each port is one
device to the collector (the same dataset behind every port). The collector runs the
real ``PollScheduler`` (default in-flight cap, first polls spread over the interval) with
``SnmpSource`` on the fast v2c path. The first cycle ends when every device has been
discovered; then ``--cycles`` steady intervals follow. Reported: failed polls, this
process's CPU per steady cycle and per device poll, datagrams the kernel dropped on UDP
sockets (/proc/net/udp). ``--pysnmp`` runs the same fleet with steady polls on pysnmp.

    .venv/bin/python tests/bench/bench_fleet.py [--devices 100,1000] [--interval 30]
        [--cycles 2] [--ports 2] [--runs 1] [--pysnmp]

``--ports 48`` serves the 48-port switch of tests/support/snmpd_switch.py (discovery
then costs about 0.1 s of CPU per device); the default serves fixtures/snmpd/dataset.conf
(2 ports, 19 sensors).
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from string import Template

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from support.snmpd import FIXTURES, SNMPD, free_udp_port
from support.snmpd_switch import switch_dataset

from lightwarden.collector.readings import PollOutcome
from lightwarden.collector.schedule import PollScheduler
from lightwarden.collector.snmp import EnginePool, SnmpCredentials, SnmpSource
from lightwarden.collector.snmp.fast import SocketPool

COMMUNITY = "quillmoor-bench"


#: Ports per snmpd process: its config reader truncates a longer agentaddress line.
PORTS_PER_AGENT = 80


def start_agents(workdir: Path, count: int, dataset: str,
                 ) -> tuple[list[subprocess.Popen[bytes]], list[int]]:  # fmt: skip
    """snmpd processes serving ``count`` ports; (processes, ports).

    A port picked free can be taken by another process before snmpd binds it (the machine
    is shared): such an agent is started again on fresh ports, up to three times.
    """
    agents: list[subprocess.Popen[bytes]] = []
    ports: list[int] = []
    try:
        for i in range(0, count, PORTS_PER_AGENT):
            for attempt in range(3):
                chunk = sorted({free_udp_port() for _ in range(2 * PORTS_PER_AGENT)})
                chunk = chunk[: min(PORTS_PER_AGENT, count - i)]
                sub = workdir / f"agent{i // PORTS_PER_AGENT}-{attempt}"
                sub.mkdir()
                try:
                    agents.append(start_agent(sub, chunk, dataset))
                except RuntimeError:
                    if attempt == 2:
                        raise
                    continue
                ports += chunk
                break
    except BaseException:
        stop_agents(agents)
        raise
    return agents, ports


def stop_agents(agents: list[subprocess.Popen[bytes]]) -> None:
    for agent in agents:
        agent.terminate()
    for agent in agents:
        agent.wait(30)


def start_agent(workdir: Path, ports: list[int], dataset: str) -> subprocess.Popen[bytes]:
    header = Template((FIXTURES / "snmpd.conf.in").read_text()).substitute(
        port=",udp:127.0.0.1:".join(map(str, ports)), community=COMMUNITY,
        v3user="qm-bench", authkey="qm-bench-auth", privkey="qm-bench-priv")  # fmt: skip
    conf = workdir / "snmpd.conf"
    conf.write_text(header + "\n" + dataset)
    (workdir / "persist").mkdir(exist_ok=True)
    proc = subprocess.Popen(
        [SNMPD, "-f", "-C", "-c", str(conf), "-Lf", str(workdir / "snmpd.log"),
         "-I", "-ifTable,-ifXTable,-interfaces,-ifstack,-entity"],
        stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        env={**os.environ, "SNMP_PERSISTENT_DIR": str(workdir / "persist"), "MIBS": ""},
    )  # fmt: skip
    deadline = time.monotonic() + 300
    for port in (ports[0], ports[-1]):
        while subprocess.run(["snmpget", "-v2c", "-c", COMMUNITY, "-t", "1", "-r", "0",
                              f"127.0.0.1:{port}", "1.3.6.1.2.1.1.3.0"],
                             capture_output=True).returncode:  # fmt: skip
            if proc.poll() is not None or time.monotonic() > deadline:
                proc.terminate()
                proc.wait(30)
                log = (workdir / "snmpd.log").read_text()[-500:]
                raise RuntimeError(f"snmpd did not start: {log}")
            time.sleep(0.5)
    return proc


def udp_drops() -> int:
    """Datagrams dropped on this host's UDP sockets so far (the last column of /proc/net/udp)."""
    total = 0
    for name in ("/proc/net/udp", "/proc/net/udp6"):
        try:
            lines = Path(name).read_text().splitlines()[1:]
        except OSError:
            continue
        total += sum(int(line.split()[-1]) for line in lines if line.strip())
    return total


async def fleet(ports: list[int], interval: float, cycles: int, fast: bool) -> dict[str, float]:
    engines, sockets = EnginePool(), SocketPool()
    outcomes: list[PollOutcome] = []
    sources = [SnmpSource(f"qm-sim-{i:04d}", "127.0.0.1", SnmpCredentials.v2c(COMMUNITY),
                          port=port, engines=engines, sockets=sockets, fast_path=fast,
                          pmd_names=("10GBASE-LR", "100GBASE-LR4"))
               for i, port in enumerate(ports)]  # fmt: skip
    sched = PollScheduler(sources, interval_s=interval, on_outcome=outcomes.append,
                          max_in_flight=64)  # fmt: skip
    drops0, cpu0, wall0 = udp_drops(), time.process_time(), time.perf_counter()
    sched.start()
    try:
        # The first cycle ends when every device has been discovered (or after 10
        # intervals); only then is a cycle steady.
        names = {s.name for s in sources}
        deadline = time.monotonic() + 10 * interval
        while time.monotonic() < deadline:
            if names <= {o.device for o in outcomes if o.ok}:
                break
            await asyncio.sleep(0.5)
        first = len(outcomes)
        cpu1, wall1 = time.process_time(), time.perf_counter()
        await asyncio.sleep(interval * cycles)
        steady = outcomes[first:]
        cpu2, wall2 = time.process_time(), time.perf_counter()
    finally:
        await sched.shutdown()
        sockets_used = sockets.sockets()
        sockets.close()
        engines.close()
    failed = sum(1 for o in outcomes if not o.ok)
    return {
        "devices": len(ports), "polls": len(outcomes), "failed": failed,
        "first_cycle_cpu_s": cpu1 - cpu0, "steady_cpu_s_per_cycle": (cpu2 - cpu1) / cycles,
        "steady_cpu_ms_per_poll": (cpu2 - cpu1) / max(1, len(steady)) * 1e3,
        "wall_s": wall2 - wall0, "udp_drops": udp_drops() - drops0,
        "client_sockets": sockets_used, "first_cycle_wall_s": wall1 - wall0,
    }  # fmt: skip


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--devices", default="100,1000")
    ap.add_argument("--interval", type=float, default=30.0)
    ap.add_argument("--cycles", type=int, default=2)
    ap.add_argument("--ports", type=int, default=2, help="ports per device: 2 or 48")
    ap.add_argument("--runs", type=int, default=1)
    ap.add_argument("--pysnmp", action="store_true", help="steady polls on pysnmp instead")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    sizes = [int(x) for x in args.devices.split(",")]
    dataset = (switch_dataset(args.ports) if args.ports != 2
               else (FIXTURES / "dataset.conf").read_text())  # fmt: skip
    results = []
    for size in sizes:
        runs = []
        for _ in range(args.runs):
            with tempfile.TemporaryDirectory() as tmp:
                agents, ports = start_agents(Path(tmp), size, dataset)
                try:
                    runs.append(asyncio.run(fleet(ports, args.interval, args.cycles,
                                                  not args.pysnmp)))  # fmt: skip
                finally:
                    stop_agents(agents)
        keys = runs[0].keys()
        results.append({k: statistics.median(r[k] for r in runs) for k in keys})
    report = {"date": time.strftime("%Y-%m-%d"), "runs": args.runs, "interval_s": args.interval,
              "ports_per_device": args.ports, "path": "pysnmp" if args.pysnmp else "fast",
              "sizes": results}  # fmt: skip
    if args.json:
        print(json.dumps(report, indent=2))
        return 0
    print(f"{report['date']}  {report['path']} path, {args.ports} ports per device, interval "
          f"{args.interval:g} s, {args.cycles} steady cycles, medians of {args.runs} run(s)")
    for r in results:
        print(f"  {int(r['devices']):5d} devices: {int(r['failed'])} failed of "
              f"{int(r['polls'])} polls, steady {r['steady_cpu_s_per_cycle']:.2f} s CPU per "
              f"cycle ({r['steady_cpu_ms_per_poll']:.2f} ms per poll), first cycle "
              f"{r['first_cycle_cpu_s']:.1f} s CPU, {int(r['udp_drops'])} UDP drops, "
              f"{int(r['client_sockets'])} client sockets")  # fmt: skip
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
