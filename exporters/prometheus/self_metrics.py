"""The monitor's own health, through prometheus-client's registry: process figures
(CPU, memory, open files), poll durations, scrape cost, polls in flight and the alert
queue. Rendered by the client library at scrape time and appended to the cached
per-device text, which stays hand-rendered because it is large and changes once per poll.
"""

from __future__ import annotations

import time
from collections.abc import Callable

from prometheus_client import CollectorRegistry, Gauge, Histogram, generate_latest
from prometheus_client.platform_collector import PlatformCollector
from prometheus_client.process_collector import ProcessCollector

#: polls run from milliseconds (a lab agent) to the poll timeout times retries
POLL_BUCKETS = (0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0)
#: assembling the exposition is a join of cached bytes: microseconds to tens of ms
SCRAPE_BUCKETS = (0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 1.0)


class SelfMetrics:
    def __init__(self) -> None:
        self.registry = CollectorRegistry(auto_describe=True)
        ProcessCollector(registry=self.registry)
        PlatformCollector(registry=self.registry)
        self.poll_seconds = Histogram(
            "lightwarden_self_poll_seconds", "Duration of device polls, by outcome.",
            ["outcome"], buckets=POLL_BUCKETS, registry=self.registry)
        self.scrape_seconds = Histogram(
            "lightwarden_self_scrape_seconds", "Time to assemble one /metrics body.",
            buckets=SCRAPE_BUCKETS, registry=self.registry)
        self.polls_in_flight = Gauge(
            "lightwarden_self_polls_in_flight", "Device polls started and not yet handled.",
            registry=self.registry)
        self.alert_queue = Gauge(
            "lightwarden_self_alert_queue_events",
            "Alert events waiting in the outbox for a receiver, all destinations.",
            registry=self.registry)
        self.alert_queue.set_function(lambda: 0.0)
        self.config_ok = Gauge(
            "lightwarden_self_config_reload_ok",
            "1 if the last config reload (SIGHUP or POST /-/reload) was applied, 0 if it "
            "was refused and the previous config keeps running.",
            registry=self.registry)
        self.config_ok.set(1)
        self.config_loaded = Gauge(
            "lightwarden_self_config_applied_timestamp_seconds",
            "When the running config was applied (start or last successful reload).",
            registry=self.registry)
        self.config_loaded.set(time.time())

    def observe_reload(self, ok: bool, at: float) -> None:
        self.config_ok.set(1 if ok else 0)
        if ok:
            self.config_loaded.set(at)

    def observe_poll(self, duration_s: float, ok: bool) -> None:
        self.poll_seconds.labels("ok" if ok else "failed").observe(max(duration_s, 0.0))

    def watch_alert_queue(self, depth: Callable[[], float]) -> None:
        self.alert_queue.set_function(depth)

    def watch_polls_in_flight(self, count: Callable[[], float]) -> None:
        self.polls_in_flight.set_function(count)

    def render(self) -> bytes:
        return generate_latest(self.registry)

    def timed(self, build: Callable[[], list[bytes]]) -> list[bytes]:
        """Build a scrape and record how long it took (seen in the next scrape)."""
        start = time.perf_counter()
        parts = build()
        self.scrape_seconds.observe(time.perf_counter() - start)
        return parts
