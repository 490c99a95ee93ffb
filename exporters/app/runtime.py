"""Serving a monitor until told to stop: shared by `run` and `demo`.

The HTTP server (metrics, status page), alert delivery and the poll schedule start
together and stop in reverse order; Ctrl-C, SIGTERM or a duration end them the same way.
"""

from __future__ import annotations

import asyncio
import contextlib
import signal
import threading
import time
from pathlib import Path

from lightwarden.collector.schedule import PollScheduler
from lightwarden.exporters.app.alerting import AlertRunner, start_alerting
from lightwarden.exporters.app.config import ConfigError, SiteConfig
from lightwarden.exporters.app.monitor import Monitor
from lightwarden.exporters.pages.http import HttpServer
from lightwarden.exporters.pages.status import StatusPage


class Stop:
    """Ctrl-C / SIGTERM / a duration end the service the same way."""

    def __init__(self) -> None:
        self.event = threading.Event()

    def install(self) -> None:
        for sig in (signal.SIGINT, signal.SIGTERM):
            with contextlib.suppress(ValueError):
                signal.signal(sig, lambda *_: self.event.set())


def scheduler(monitor: Monitor, cfg: SiteConfig) -> PollScheduler:
    """One job per source, at the device's own interval where it sets one."""
    if not monitor.sources:
        monitor.build_sources()
    sched = PollScheduler(
        interval_s=cfg.poll.interval_s,
        jitter_s=cfg.poll.jitter_s,
        on_outcome=monitor.handle,
        clock=monitor.clock,
        backoff_cap_s=cfg.poll.max_backoff_s,
        max_in_flight=cfg.poll.max_in_flight,
    )
    by_name = {d.name: d for d in cfg.devices}
    for s in monitor.sources:
        sched.add_source(s, interval_s=by_name[s.name].interval_s)
    if monitor.self_metrics is not None:
        monitor.self_metrics.watch_polls_in_flight(sched.in_flight)
    return sched


def start_http(monitor: Monitor, host: str, port: int) -> HttpServer:
    server = HttpServer(monitor.exposition, host=host, port=port)
    StatusPage(monitor).mount(server)
    try:
        server.start()
    except OSError as exc:
        raise ConfigError(str(exc)) from None
    return server


class Service:
    """A monitor with its HTTP server and alert delivery, ready to serve."""

    def __init__(self, monitor: Monitor, cfg: SiteConfig, base_dir: Path) -> None:
        self.monitor = monitor
        self.cfg = cfg
        self.server = start_http(monitor, cfg.listen.host, cfg.listen.port)
        try:
            self.alerting: AlertRunner | None = start_alerting(monitor.lifecycle, cfg, base_dir,
                                                               monitor.link_alerts)
        except BaseException:
            self.server.stop()
            raise
        if self.alerting is not None:
            monitor.alert_sink = self.alerting.submit
            if monitor.self_metrics is not None:
                backlog = self.alerting.dispatcher.backlog
                monitor.self_metrics.watch_alert_queue(lambda: float(sum(backlog().values())))

    @property
    def url(self) -> str:
        return self.server.url

    def serve(self, duration: float | None = None) -> None:
        """Poll on schedule until a signal or the duration; then stop everything."""
        stop = Stop()
        stop.install()
        try:
            asyncio.run(_serve(self.monitor, self.cfg, stop, duration))
        finally:
            if self.alerting is not None:
                self.alerting.stop()
            self.server.stop()


async def _serve(monitor: Monitor, cfg: SiteConfig, stop: Stop, duration: float | None) -> None:
    sched = scheduler(monitor, cfg)
    sched.start()
    deadline = None if duration is None else time.monotonic() + duration
    try:
        while not stop.event.is_set():
            if deadline is not None and time.monotonic() >= deadline:
                break
            await asyncio.sleep(0.2)
    finally:
        await sched.shutdown(timeout_s=15.0)
        # SNMP engines hold transports bound to this loop: close them before it ends.
        monitor.close()
