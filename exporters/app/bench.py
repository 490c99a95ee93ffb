"""`lightwarden bench poll`: what polling one device costs this process, measured.

One discovery poll, then ``cycles`` steady polls of the same device, each timed by this
process's CPU clock (``time.process_time``: the agent's own CPU is not counted when it
runs elsewhere). Prints CPU per varbind and per optic for discovery and for a steady
poll, and how many such optics one core would poll per minute on steady polls alone.
"""

from __future__ import annotations

import asyncio
import json
import statistics
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass

from lightwarden.collector.snmp.source import SnmpSource


class BenchError(Exception):
    """A bench that could not run; the message names the device and why."""


@dataclass(slots=True)
class PollBench:
    device: str
    path: str  # "fast v2c" or "pysnmp"
    optics: int
    readings: int
    discovery_varbinds: int
    discovery_cpu_s: float
    steady_varbinds: int  # per steady poll
    steady_cpu_s: float  # median per steady poll
    cycles: int

    @property
    def discovery_us_per_varbind(self) -> float:
        return self.discovery_cpu_s / max(1, self.discovery_varbinds) * 1e6

    @property
    def steady_us_per_varbind(self) -> float:
        return self.steady_cpu_s / max(1, self.steady_varbinds) * 1e6

    @property
    def steady_ms_per_optic(self) -> float:
        return self.steady_cpu_s / max(1, self.optics) * 1e3

    @property
    def optics_per_core_minute(self) -> int:
        return int(60.0 / self.steady_cpu_s * self.optics) if self.steady_cpu_s > 0 else 0

    def as_dict(self) -> dict[str, object]:
        out = asdict(self)
        out.update(discovery_us_per_varbind=round(self.discovery_us_per_varbind, 2),
                   steady_us_per_varbind=round(self.steady_us_per_varbind, 2),
                   steady_ms_per_optic=round(self.steady_ms_per_optic, 4),
                   optics_per_core_minute=self.optics_per_core_minute)  # fmt: skip
        return out

    def text(self) -> str:
        return "\n".join((
            f"{self.device}: {self.optics} optics, {self.readings} readings; steady polls "
            f"on the {self.path} path",
            f"  discovery    {self.discovery_varbinds:7d} varbinds  "
            f"{self.discovery_cpu_s * 1e3:9.1f} ms CPU  "
            f"{self.discovery_us_per_varbind:7.2f} µs/varbind",
            f"  steady poll  {self.steady_varbinds:7d} varbinds  "
            f"{self.steady_cpu_s * 1e3:9.2f} ms CPU  {self.steady_us_per_varbind:7.2f} µs/varbind"
            f"  {self.steady_ms_per_optic:.3f} ms/optic (median of {self.cycles})",
            f"  one core, steady polls only: about {self.optics_per_core_minute:,} optics "
            "per minute",
        ))  # fmt: skip


async def bench_poll(source: SnmpSource, cycles: int) -> PollBench:
    """Discover ``source`` once, then poll it ``cycles`` times; a failed poll is an error."""
    start, seen = time.process_time(), source.varbinds
    first = await source.poll(time.time())
    discovery_cpu = time.process_time() - start
    if not first.ok or first.batch is None:
        raise BenchError(first.error or f"{source.name}: discovery failed")
    discovery_varbinds = source.varbinds - seen
    times: list[float] = []
    per_poll = 0
    for _ in range(cycles):
        start, seen = time.process_time(), source.varbinds
        outcome = await source.poll(time.time())
        times.append(time.process_time() - start)
        per_poll = source.varbinds - seen
        if not outcome.ok:
            raise BenchError(outcome.error or f"{source.name}: poll failed")
    return PollBench(
        device=source.name, path="fast v2c" if source.fast_path else "pysnmp",
        optics=len(first.batch.optics), readings=len(first.batch),
        discovery_varbinds=discovery_varbinds, discovery_cpu_s=discovery_cpu,
        steady_varbinds=per_poll, steady_cpu_s=statistics.median(times), cycles=cycles,
    )  # fmt: skip


def run_bench_poll(
    source: SnmpSource, cycles: int, as_json: bool, close: Callable[[], None]
) -> str:
    """Run the bench on its own event loop; the report as text or JSON.

    ``close`` releases the source's shared parts, inside the loop their sockets belong to.
    """
    if cycles < 1:
        close()
        raise BenchError("--cycles must be at least 1")

    async def main() -> PollBench:
        try:
            return await bench_poll(source, cycles)
        finally:
            close()

    result = asyncio.run(main())
    return json.dumps(result.as_dict(), indent=2) if as_json else result.text()
