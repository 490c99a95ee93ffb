"""Starting real binaries (Alertmanager, Prometheus, promtool, snmpd...) for tests.

- ``require_binary(name)``: the path, or skip locally / fail when ``CI=true``.
- ``free_port()``: a loopback TCP port that was free a moment ago.
- ``Proc``: a started process with its combined log captured to a file; ``wait_http`` and
  ``wait_port`` poll with a bounded timeout and raise with the log tail on failure;
  ``stop()`` terminates (then kills) it. Use as a context manager or from a fixture.
- ``start_on_free_port(build_argv, ready_path)``: retries with a new port when the chosen
  port was taken between probing and binding.
- ``wait_for(predicate, timeout, what)``: bounded polling for test conditions.
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import time
import urllib.error
import urllib.request
from collections.abc import Callable, Sequence
from pathlib import Path

import pytest

LOOPBACK = "127.0.0.1"


def in_ci() -> bool:
    return os.environ.get("CI", "").lower() == "true"


def require_binary(name: str, package: str = "") -> str:
    """Path of ``name`` (a command or an absolute path); missing -> pytest skip locally,
    failure under CI=true. ``package`` names the Debian package that brings it."""
    path = shutil.which(name)
    if path is None:
        msg = f"required binary {name!r} not found" + (
            f" (Debian package {package!r})" if package else " on PATH")
        if in_ci():
            pytest.fail(msg + " (CI=true: external binaries are mandatory)")
        pytest.skip(msg)
    return path


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((LOOPBACK, 0))
        return s.getsockname()[1]


def wait_for(predicate: Callable[[], object], timeout: float, what: str, step: float = 0.05):
    """Poll ``predicate`` until truthy (returns its value) or fail naming ``what``."""
    deadline = time.monotonic() + timeout
    while True:
        value = predicate()
        if value:
            return value
        if time.monotonic() >= deadline:
            raise AssertionError(f"timed out after {timeout:.0f} s waiting for {what}")
        time.sleep(step)


class ProcError(RuntimeError):
    pass


class Proc:
    """A child process whose stdout+stderr go to a log file we can quote on failure."""

    def __init__(self, argv: Sequence[str], log_path: Path, cwd: Path | None = None,
                 env: dict[str, str] | None = None) -> None:
        self.argv = list(argv)
        self.log_path = Path(log_path)
        self._log = open(self.log_path, "wb")  # noqa: SIM115 - closed in stop()
        self.popen = subprocess.Popen(
            self.argv,
            stdout=self._log,
            stderr=subprocess.STDOUT,
            stdin=subprocess.DEVNULL,
            cwd=cwd,
            env=env,
        )

    def log_tail(self, chars: int = 3000) -> str:
        try:
            return self.log_path.read_text(errors="replace")[-chars:]
        except OSError:
            return "<no log>"

    def _check_alive(self) -> None:
        if self.popen.poll() is not None:
            raise ProcError(
                f"{Path(self.argv[0]).name} exited with {self.popen.returncode}:\n{self.log_tail()}"
            )

    def wait_port(self, port: int, host: str = LOOPBACK, timeout: float = 20.0) -> None:
        deadline = time.monotonic() + timeout
        while True:
            self._check_alive()
            try:
                with socket.create_connection((host, port), timeout=0.5):
                    return
            except OSError:
                pass
            if time.monotonic() >= deadline:
                raise ProcError(
                    f"{Path(self.argv[0]).name} not listening on {host}:{port} after "
                    f"{timeout:.0f} s:\n{self.log_tail()}"
                )
            time.sleep(0.05)

    def wait_http(self, url: str, timeout: float = 20.0) -> None:
        """Wait until GET ``url`` answers 200."""
        deadline = time.monotonic() + timeout
        opener = urllib.request.build_opener(urllib.request.ProxyHandler({}))
        last = ""
        while True:
            self._check_alive()
            try:
                with opener.open(url, timeout=1.0) as resp:
                    if resp.status == 200:
                        return
                    last = f"HTTP {resp.status}"
            except (OSError, urllib.error.URLError) as exc:
                last = str(exc)
            if time.monotonic() >= deadline:
                raise ProcError(
                    f"{url} not ready after {timeout:.0f} s ({last}):\n{self.log_tail()}"
                )
            time.sleep(0.05)

    def stop(self, timeout: float = 10.0) -> None:
        if self.popen.poll() is None:
            self.popen.terminate()
            try:
                self.popen.wait(timeout)
            except subprocess.TimeoutExpired:
                self.popen.kill()
                self.popen.wait(timeout)
        self._log.close()

    def __enter__(self) -> Proc:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def start_on_free_port(
    build_argv: Callable[[int], Sequence[str]],
    log_path: Path,
    ready_path: str = "/",
    attempts: int = 3,
    timeout: float = 20.0,
) -> tuple[Proc, int]:
    """Start a server on a fresh loopback port; retry when that port got taken meanwhile."""
    last: Exception | None = None
    for _ in range(attempts):
        port = free_port()
        proc = Proc(build_argv(port), log_path)
        try:
            proc.wait_http(f"http://{LOOPBACK}:{port}{ready_path}", timeout=timeout)
            return proc, port
        except ProcError as exc:
            last = exc
            proc.stop()
    raise ProcError(f"could not start after {attempts} attempts: {last}")


def run(argv: Sequence[str], cwd: Path | None = None, timeout: float = 60.0):
    """Run a command to completion; returns CompletedProcess with text output."""
    return subprocess.run(
        list(argv), cwd=cwd, capture_output=True, text=True, timeout=timeout, check=False
    )


def alertmanager_argv(binary: str, config: Path, storage: Path, port: int,
                      *extra: str) -> list[str]:
    """A loopback Alertmanager with clustering off (no gossip port), for tests."""
    return [
        binary,
        f"--config.file={config}",
        f"--storage.path={storage}",
        f"--web.listen-address={LOOPBACK}:{port}",
        f"--web.external-url=http://{LOOPBACK}:{port}/",
        "--cluster.listen-address=",
        *extra,
    ]


#: An Alertmanager config routing every alert to one webhook (send_resolved on); group
#: waits short so notifications follow within a second or two, repeats out of the way.
ALERTMANAGER_CONFIG = """\
route:
  receiver: hook
  group_by: [alertname, device, port, lane, quantity]
  group_wait: {group_wait}
  group_interval: 1s
  repeat_interval: 1h
receivers:
  - name: hook
    webhook_configs:
      - url: {url}
        send_resolved: true
"""
