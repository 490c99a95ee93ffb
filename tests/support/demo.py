"""Running the real `lightwarden demo` command as a child process, for end-to-end tests.

``DemoProc`` starts ``python -m lightwarden.exporters.app.cli demo ...`` (the same entry point
as the installed `lightwarden` script) with its output captured to a log file, reads the
metrics URL it prints, and scrapes it. ``Scrape`` indexes one scrape parsed with
prometheus_client's own text parser (a reference parser outside the project).
"""

from __future__ import annotations

import re
import signal
import subprocess
import sys
import time
import urllib.request
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

from prometheus_client.parser import text_string_to_metric_families
from prometheus_client.samples import Sample

from support.procs import Proc, ProcError, wait_for

_METRICS_LINE = re.compile(r"^  metrics: (http://127\.0\.0\.1:\d+/metrics)$", re.M)
_OPENER = urllib.request.build_opener(urllib.request.ProxyHandler({}))


@dataclass(slots=True)
class Scrape:
    """One scrape of /metrics: raw text, when it was taken, samples by metric name."""

    text: str
    at: float
    by_name: dict[str, list[Sample]] = field(default_factory=lambda: defaultdict(list))

    @classmethod
    def parse(cls, text: str, at: float) -> Scrape:
        s = cls(text, at)
        for fam in text_string_to_metric_families(text):
            for sample in fam.samples:
                s.by_name[sample.name].append(sample)
        return s

    def samples(self, name: str, **labels: str) -> list[Sample]:
        return [
            x for x in self.by_name.get(name, ())
            if all(x.labels.get(k) == v for k, v in labels.items())
        ]

    def value(self, name: str, **labels: str) -> float | None:
        """The one sample matching ``labels`` (None when absent; error when ambiguous)."""
        found = self.samples(name, **labels)
        assert len(found) <= 1, f"{name}{labels}: {len(found)} samples, expected one"
        return found[0].value if found else None

    def condition(self, device: str, port: str) -> str | None:
        found = self.samples("lightwarden_optic_condition", device=device, port=port)
        assert len(found) <= 1, f"{device} {port}: {len(found)} condition series"
        return found[0].labels["condition"] if found else None

    def devices_polled(self) -> set[str]:
        return {x.labels["device"] for x in self.samples("lightwarden_device_optics")}


class DemoProc:
    """`lightwarden demo` on ephemeral loopback ports; stop() on teardown, always."""

    def __init__(
        self,
        workdir: Path,
        *,
        duration: float,
        speed: float,
        interval: float = 2.0,
        hold: float = 2.0,
        extra: Sequence[str] = (),
        start_timeout: float = 60.0,
    ) -> None:
        workdir.mkdir(parents=True, exist_ok=True)
        self.state_dir = workdir / "state"
        self.argv = [
            sys.executable, "-m", "lightwarden.exporters.app.cli", "demo",
            "--duration", f"{duration:g}", "--port", "0", "--interval", f"{interval:g}",
            "--hold", f"{hold:g}", "--speed", f"{speed:g}",
            "--state-dir", str(self.state_dir), *extra,
        ]
        self.duration = duration
        self.hold = hold
        self.started = time.time()
        # cwd: anything the demo writes relative to it stays inside the test's directory.
        self.proc = Proc(self.argv, workdir / "demo.log", cwd=workdir)
        try:
            self.metrics_url: str = wait_for(
                self._url, start_timeout, "the demo to print its metrics URL", step=0.1
            )
        except BaseException:
            self.stop()
            raise

    def _url(self) -> str | None:
        m = _METRICS_LINE.search(self.proc.log_tail(100_000))
        if m:
            return m.group(1)
        if self.proc.popen.poll() is not None:
            raise ProcError(
                f"demo exited with {self.proc.popen.returncode} before printing its "
                f"metrics URL:\n{self.proc.log_tail()}"
            )
        return None

    @property
    def port(self) -> int:
        return int(self.metrics_url.rsplit(":", 1)[1].split("/", 1)[0])

    def log_tail(self, chars: int = 4000) -> str:
        return self.proc.log_tail(chars)

    def alive(self) -> bool:
        return self.proc.popen.poll() is None

    def scrape(self, timeout: float = 10.0) -> Scrape:
        at = time.time()
        with _OPENER.open(self.metrics_url, timeout=timeout) as resp:
            assert resp.status == 200, f"/metrics answered {resp.status}"
            text = resp.read().decode("utf-8")
        return Scrape.parse(text, at)

    def scrape_until(self, predicate, timeout: float, what: str) -> Scrape:
        """Scrape about once a second until ``predicate(scrape)`` holds (bounded)."""
        last: list[Scrape] = []

        def attempt() -> Scrape | None:
            if not self.alive():
                raise AssertionError(f"demo exited early while waiting for {what}:\n"
                                     f"{self.log_tail()}")
            s = self.scrape()
            last[:] = [s]
            return s if predicate(s) else None

        try:
            return wait_for(attempt, timeout, what, step=1.0)
        except AssertionError as exc:
            raise AssertionError(f"{exc}\n--- demo log tail ---\n{self.log_tail()}") from None

    def wait_exit(self, timeout: float) -> int:
        try:
            return self.proc.popen.wait(timeout)
        except subprocess.TimeoutExpired:
            raise AssertionError(
                f"demo still running {timeout:.0f} s after expected end:\n{self.log_tail()}"
            ) from None

    def terminate(self, timeout: float = 30.0) -> int:
        """SIGTERM (what a service manager sends) and wait for a clean exit."""
        if self.alive():
            self.proc.popen.send_signal(signal.SIGTERM)
        return self.wait_exit(timeout)

    def stop(self) -> None:
        self.proc.stop(timeout=20.0)
