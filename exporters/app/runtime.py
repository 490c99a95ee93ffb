"""Serving a monitor until told to stop: shared by `run` and `demo`.

The HTTP server (metrics, status page), alert delivery and the poll schedule start
together and stop in reverse order; Ctrl-C, SIGTERM or a duration end them the same way.
SIGHUP and ``POST /-/reload`` (loopback only) reload the config (exporters/app/reload.py)
where there is a config file to reload; the demo has none and says so.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import signal
import threading
import time
from collections.abc import Callable
from pathlib import Path

from lightwarden.collector.schedule import PollScheduler
from lightwarden.exporters.app.alerting import AlertRunner, start_alerting
from lightwarden.exporters.app.config import ConfigError, SiteConfig
from lightwarden.exporters.app.monitor import Monitor
from lightwarden.exporters.app.reload import Reloader, ReloadResult
from lightwarden.exporters.pages.http import HttpRequest, HttpServer, Response
from lightwarden.exporters.pages.status import StatusPage

log = logging.getLogger("lightwarden.runtime")


class Stop:
    """Ctrl-C / SIGTERM / a duration end the service the same way; SIGHUP asks for a
    reload (without a handler it would end the process for good)."""

    def __init__(self) -> None:
        self.event = threading.Event()
        self.reload = threading.Event()

    def install(self) -> None:
        for sig in (signal.SIGINT, signal.SIGTERM):
            with contextlib.suppress(ValueError):
                signal.signal(sig, lambda *_: self.event.set())
        with contextlib.suppress(ValueError, AttributeError):
            signal.signal(signal.SIGHUP, lambda *_: self.reload.set())


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

    def __init__(self, monitor: Monitor, cfg: SiteConfig, base_dir: Path,
                 config_path: str | Path | None = None,
                 transform: Callable[[SiteConfig], SiteConfig] | None = None) -> None:
        self.monitor = monitor
        self.cfg = cfg
        self.reloader = (Reloader(monitor, cfg, config_path, base_dir, transform)
                         if config_path is not None else None)
        self._loop: asyncio.AbstractEventLoop | None = None
        self._sched: PollScheduler | None = None
        self.server = start_http(monitor, cfg.listen.host, cfg.listen.port)
        self.server.add_post_route("/-/reload", self._http_reload)
        try:
            self.alerting: AlertRunner | None = start_alerting(
                monitor.lifecycle, cfg, base_dir, monitor.parts.state_dir,
                links=monitor.link_alerts, tracker=monitor.parts.tracker)
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
            asyncio.run(self._serve(stop, duration))
        finally:
            if self.alerting is not None:
                self.alerting.stop()
            self.server.stop()

    async def _serve(self, stop: Stop, duration: float | None) -> None:
        monitor = self.monitor
        sched = self._sched = scheduler(monitor, self.cfg)
        self._loop = asyncio.get_running_loop()
        sched.start()
        deadline = None if duration is None else time.monotonic() + duration
        next_sweep = time.monotonic() + 1.0
        try:
            while not stop.event.is_set():
                if deadline is not None and time.monotonic() >= deadline:
                    break
                if stop.reload.is_set():
                    stop.reload.clear()
                    await self.reload(sched)
                if time.monotonic() >= next_sweep:
                    monitor.withdraw_stale(monitor.clock())
                    next_sweep = time.monotonic() + 1.0
                await asyncio.sleep(0.2)
        finally:
            self._loop = None
            await sched.shutdown(timeout_s=15.0)
            # SNMP engines hold transports bound to this loop: close them before it ends.
            monitor.close()

    async def reload(self, sched: PollScheduler) -> ReloadResult:
        if self.reloader is None:
            log.warning("reload asked for, but this monitor has no config file to re-read")
            return ReloadResult(False, "no config file to reload (the demo builds its own)")
        result = await self.reloader.reload(sched)
        if result.ok:
            self.cfg = self.reloader.cfg
        return result

    def _http_reload(self, _req: HttpRequest) -> Response:
        loop, sched = self._loop, self._sched
        if loop is None or sched is None:
            return 503, "text/plain; charset=utf-8", b"not running yet\n"
        fut = asyncio.run_coroutine_threadsafe(self.reload(sched), loop)
        try:
            result = fut.result(timeout=120.0)
        except TimeoutError:
            return 504, "text/plain; charset=utf-8", b"reload still running\n"
        word = "reloaded" if result.ok else "refused, the previous config keeps running"
        body = f"{word}: {result.message}\n".encode()
        return (200 if result.ok else 400), "text/plain; charset=utf-8", body
