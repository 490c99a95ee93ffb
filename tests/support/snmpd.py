"""Run net-snmp snmpd on loopback serving fixtures/snmpd/dataset.conf, for tests.

snmpd missing: the test is skipped locally and fails when CI=true (project rule).
"""

from __future__ import annotations

import os
import secrets
import socket
import subprocess
import time
from dataclasses import dataclass, field
from pathlib import Path
from string import Template

from support.procs import require_binary

SNMPD = "/usr/sbin/snmpd"
FIXTURES = Path(__file__).resolve().parents[2] / "fixtures" / "snmpd"
SYS_UPTIME = "1.3.6.1.2.1.1.3.0"


def free_udp_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


@dataclass
class SnmpdAgent:
    port: int
    community: str = field(repr=False)
    v3user: str
    authkey: str = field(repr=False)
    privkey: str = field(repr=False)
    workdir: Path
    process: subprocess.Popen | None = None

    @property
    def address(self) -> str:
        return f"udp:127.0.0.1:{self.port}"

    def v2c_args(self) -> list[str]:
        return ["-v2c", "-c", self.community, "-t", "2", "-r", "1"]

    def v3_args(self) -> list[str]:
        return [
            "-v3", "-l", "authPriv", "-u", self.v3user, "-a", "SHA", "-A", self.authkey,
            "-x", "AES", "-X", self.privkey, "-t", "2", "-r", "1",
        ]  # fmt: skip

    def cli(self, tool: str, *args: str, v3: bool = False) -> str:
        """Run a net-snmp CLI tool against this agent with numeric output."""
        binary = require_binary(tool)
        auth = self.v3_args() if v3 else self.v2c_args()
        done = subprocess.run(
            [binary, *auth, "-On", "-M", "/dev/null", self.address, *args],
            capture_output=True,
            text=True,
            timeout=30,
            env={**os.environ, "MIBS": ""},
        )
        if done.returncode != 0:
            raise RuntimeError(f"{tool} failed: {done.stderr.strip()}")
        return done.stdout

    def stop(self) -> None:
        if self.process is not None and self.process.poll() is None:
            self.process.terminate()
            try:
                self.process.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait(timeout=10)
        self.process = None


def start_snmpd(
    workdir: Path,
    extra_config: str = "",
    *,
    like: SnmpdAgent | None = None,
    replace: dict[str, str] | None = None,
    dataset: str | None = None,
) -> SnmpdAgent:
    """Write the config, start snmpd in the foreground, wait until it answers.

    ``like`` reuses another (stopped) agent's port and credentials, to play a restart;
    ``replace`` edits the dataset text (old line -> new line) to play a changed device;
    ``dataset`` serves other ``override`` lines instead of fixtures/snmpd/dataset.conf.
    """
    snmpd = require_binary(SNMPD)
    require_binary("snmpget")
    agent = SnmpdAgent(
        port=like.port if like else free_udp_port(),
        community=like.community if like else "hgl-" + secrets.token_hex(6),
        v3user="hgl-poller",
        authkey=like.authkey if like else "auth-" + secrets.token_hex(8),
        privkey=like.privkey if like else "priv-" + secrets.token_hex(8),
        workdir=workdir,
    )
    if dataset is None:
        dataset = (FIXTURES / "dataset.conf").read_text()
    for old, new in (replace or {}).items():
        if old not in dataset:
            raise ValueError(f"dataset.conf has no line {old!r} to replace")
        dataset = dataset.replace(old, new)
    header = Template((FIXTURES / "snmpd.conf.in").read_text()).substitute(
        port=agent.port,
        community=agent.community,
        v3user=agent.v3user,
        authkey=agent.authkey,
        privkey=agent.privkey,
    )
    workdir.mkdir(parents=True, exist_ok=True)
    conf = workdir / "snmpd.conf"
    conf.write_text(header + "\n" + dataset + extra_config)
    persistent = workdir / "persist"
    persistent.mkdir(exist_ok=True)
    log = workdir / "snmpd.log"
    agent.process = subprocess.Popen(
        [snmpd, "-f", "-C", "-c", str(conf), "-Lf", str(log),
         "-I", "-ifTable,-ifXTable,-interfaces,-ifstack,-entity"],
        stdin=subprocess.DEVNULL,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        env={**os.environ, "SNMP_PERSISTENT_DIR": str(persistent), "MIBS": ""},
    )  # fmt: skip
    deadline = time.monotonic() + 30.0
    while True:
        if agent.process.poll() is not None:
            text = log.read_text() if log.exists() else ""
            raise RuntimeError(f"snmpd exited with {agent.process.returncode}: {text[-2000:]}")
        try:
            agent.cli("snmpget", SYS_UPTIME)
            agent.cli("snmpget", SYS_UPTIME, v3=True)
            return agent
        except (RuntimeError, subprocess.TimeoutExpired):
            if time.monotonic() > deadline:
                agent.stop()
                raise RuntimeError("snmpd did not answer within 30 s") from None
            time.sleep(0.2)
