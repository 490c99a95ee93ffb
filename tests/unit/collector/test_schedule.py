"""PollScheduler: per-device jobs, no overlap, back-off, graceful shutdown.

These sources are tiny in-process objects implementing the PollSource protocol (the
scheduler's only dependency); the real SNMP source is exercised in test_snmp_*.py.
Nothing here asserts on speed: waits are bounded by events with generous timeouts.
"""

from __future__ import annotations

import asyncio
import itertools

import pytest

from lightwarden.collector.readings import BatchBuilder, PollOutcome
from lightwarden.collector.schedule import PollScheduler
from lightwarden.collector.source import PollSource

WAIT = 20.0  # upper bound for "eventually", never an expected duration


class CountingSource:
    """Answers OK (or fails when told), optionally slowly, counting overlap."""

    def __init__(self, name: str, *, delay: float = 0.0, fail: bool = False) -> None:
        self.name = name
        self.delay = delay
        self.fail = fail
        self.calls: list[float] = []
        self.running = 0
        self.max_running = 0
        self.started = asyncio.Event()
        self.release: asyncio.Event | None = None
        self.finished = 0

    def close(self) -> None:
        pass

    async def poll(self, now: float) -> PollOutcome:
        self.calls.append(now)
        self.running += 1
        self.max_running = max(self.max_running, self.running)
        self.started.set()
        try:
            if self.release is not None:
                await self.release.wait()
            if self.delay:
                await asyncio.sleep(self.delay)
        finally:
            self.running -= 1
        self.finished += 1
        if self.fail:
            return PollOutcome(self.name, now, 0.0, error=f"{self.name}: no answer",
                               error_kind="timeout")  # fmt: skip
        return PollOutcome(self.name, now, 0.0, batch=BatchBuilder(self.name).build(now))


async def _until(predicate, what: str) -> None:
    async def spin():
        while not predicate():
            await asyncio.sleep(0.01)

    try:
        await asyncio.wait_for(spin(), WAIT)
    except TimeoutError:
        pytest.fail(f"gave up waiting for {what}")


def test_sources_satisfy_the_protocol():
    assert isinstance(CountingSource("a"), PollSource)


def test_each_device_is_polled_and_outcomes_delivered():
    outcomes: list[PollOutcome] = []

    async def main():
        sources = [CountingSource("hgl-a"), CountingSource("hgl-b"), CountingSource("hgl-c")]
        sched = PollScheduler(sources, interval_s=0.05, on_outcome=outcomes.append)
        sched.start()
        await _until(lambda: all(len(s.calls) >= 3 for s in sources), "three polls each")
        await sched.shutdown(timeout_s=WAIT)
        return sources

    sources = asyncio.run(main())
    names = {o.device for o in outcomes}
    assert names == {"hgl-a", "hgl-b", "hgl-c"}
    assert all(o.ok for o in outcomes)
    for source in sources:
        assert source.calls == sorted(source.calls)  # the injected clock reached poll(now)


def test_async_outcome_callback_is_awaited_and_its_errors_contained():
    seen: list[str] = []

    async def handler(outcome: PollOutcome) -> None:
        await asyncio.sleep(0)
        seen.append(outcome.device)
        raise RuntimeError("handler bug")  # must not stop polling

    async def main():
        source = CountingSource("hgl-a")
        sched = PollScheduler([source], interval_s=0.05, on_outcome=handler)
        sched.start()
        await _until(lambda: len(seen) >= 3, "three outcomes despite handler errors")
        await sched.shutdown(timeout_s=WAIT)

    asyncio.run(main())
    assert seen[:3] == ["hgl-a"] * 3


def test_slow_poll_never_overlaps_itself():
    async def main():
        slow = CountingSource("hgl-slow", delay=0.3)
        sched = PollScheduler([slow], interval_s=0.05)
        sched.start()
        await _until(lambda: slow.finished >= 3, "three slow polls")
        await sched.shutdown(timeout_s=WAIT)
        return slow

    slow = asyncio.run(main())
    # max_instances=1: runs that come due while one is in flight are skipped, not stacked
    assert slow.max_running == 1


def test_one_raising_source_does_not_stop_others():
    class Exploding:
        name = "hgl-broken"

        async def poll(self, now: float) -> PollOutcome:
            raise ValueError("bug in a source")

    outcomes: list[PollOutcome] = []

    async def main():
        good = CountingSource("hgl-good")
        sched = PollScheduler([Exploding(), good], interval_s=0.05, on_outcome=outcomes.append)
        sched.start()
        await _until(lambda: len(good.calls) >= 3 and any(
            o.device == "hgl-broken" for o in outcomes), "polls of both")  # fmt: skip
        await sched.shutdown(timeout_s=WAIT)

    asyncio.run(main())
    broken = [o for o in outcomes if o.device == "hgl-broken"]
    assert broken and broken[0].error_kind == "internal"
    assert "ValueError" in broken[0].error and "Traceback" not in broken[0].error


class FakeClock:
    def __init__(self, t: float = 1000.0) -> None:
        self.t = t

    def __call__(self) -> float:
        return self.t


def test_backoff_stretches_interval_exponentially_up_to_cap_and_resets():
    clock = FakeClock()
    source = CountingSource("hgl-flaky", fail=True)
    sched = PollScheduler(
        [source], interval_s=10.0, clock=clock, backoff_factor=2.0, backoff_cap_s=40.0
    )
    device = sched.devices["hgl-flaky"]

    async def tick_all(until: float) -> list[float]:
        """Fire the job at every interval tick up to `until`; return the times it polled."""
        polled = []
        while clock.t <= until:
            outcome = await sched.poll_device("hgl-flaky")
            if outcome is not None:
                polled.append(clock.t)
            clock.t += 10.0
        return polled

    async def main():
        start = clock.t
        polled = await tick_all(start + 150.0)
        # failures 1, 2, 3, 4... stretch the gap to 20, 40, then the 40 s cap
        gaps = [b - a for a, b in itertools.pairwise(polled)]
        assert gaps[:4] == [20.0, 40.0, 40.0, 40.0]
        assert device.consecutive_failures == len(polled)
        assert device.skipped > 0
        # success resets: next allowed poll happens, then polling is back to every tick
        source.fail = False
        await _until_allowed()
        before = len(source.calls)
        await tick_all(clock.t + 30.0)
        assert len(source.calls) - before == 4  # four ticks (t, +10, +20, +30), none skipped
        assert device.consecutive_failures == 0

    async def _until_allowed():
        while await sched.poll_device("hgl-flaky") is None:
            clock.t += 10.0
        clock.t += 10.0

    asyncio.run(main())


def test_graceful_shutdown_waits_for_in_flight_poll():
    outcomes: list[PollOutcome] = []

    async def main():
        source = CountingSource("hgl-busy")
        source.release = asyncio.Event()
        sched = PollScheduler([source], interval_s=0.05, on_outcome=outcomes.append)
        sched.start()
        await asyncio.wait_for(source.started.wait(), WAIT)
        stopping = asyncio.ensure_future(sched.shutdown(timeout_s=WAIT))
        await asyncio.sleep(0.1)
        assert not stopping.done()  # still waiting for the poll, not cancelling it
        source.release.set()
        cancelled = await stopping
        return source, cancelled, sched

    source, cancelled, sched = asyncio.run(main())
    assert cancelled == 0
    assert source.finished == 1 and len(outcomes) == 1 and outcomes[0].ok
    assert not sched.running


def test_shutdown_timeout_cancels_stuck_poll():
    async def main():
        source = CountingSource("hgl-stuck")
        source.release = asyncio.Event()  # never set
        sched = PollScheduler([source], interval_s=0.05)
        sched.start()
        await asyncio.wait_for(source.started.wait(), WAIT)
        return await sched.shutdown(timeout_s=0.2), source

    cancelled, source = asyncio.run(main())
    assert cancelled == 1 and source.finished == 0


def test_bad_intervals_are_refused():
    with pytest.raises(ValueError, match="interval"):
        PollScheduler(interval_s=0)
    sched = PollScheduler(interval_s=5)
    with pytest.raises(ValueError, match="hgl-x"):
        sched.add_source(CountingSource("hgl-x"), interval_s=-1)


def test_polls_in_flight_never_exceed_the_cap():
    # 12 slow devices, cap 3: at most 3 polls run at once, and every device still gets its
    # turn (the others wait for a slot rather than being dropped).
    async def main():
        sources = [CountingSource(f"qm-edge-{i:02d}", delay=0.05) for i in range(12)]
        running = {"now": 0, "max": 0}

        class Watch:
            def __init__(self, inner):
                self.inner, self.name = inner, inner.name

            def close(self):
                pass

            async def poll(self, now):
                running["now"] += 1
                running["max"] = max(running["max"], running["now"])
                try:
                    return await self.inner.poll(now)
                finally:
                    running["now"] -= 1

        sched = PollScheduler([Watch(s) for s in sources], interval_s=0.2, max_in_flight=3,
                              start_spread_s=0.0)  # fmt: skip
        sched.start()
        try:
            await _until(lambda: all(s.finished for s in sources), "every device polled")
        finally:
            await sched.shutdown()
        return running["max"]

    assert asyncio.run(main()) == 3


def test_cap_must_be_positive():
    with pytest.raises(ValueError, match="in flight"):
        PollScheduler(interval_s=1.0, max_in_flight=0)


def test_first_polls_spread_over_the_whole_interval(monkeypatch):
    # With no start spread given, the first poll of each device lands anywhere in its
    # interval, not only inside the jitter (which bunched a fleet's first cycle).
    bounds: list[float] = []
    monkeypatch.setattr("lightwarden.collector.schedule.random.uniform",
                        lambda low, high: bounds.append(high) or 0.0)  # fmt: skip

    async def main():
        sched = PollScheduler([CountingSource("qm-a")], interval_s=45.0, jitter_s=5.0)
        sched.add_source(CountingSource("qm-b"), interval_s=300.0)
        sched.start()
        await sched.shutdown()

    asyncio.run(main())
    assert sorted(bounds) == [45.0, 300.0]
