"""Fixtures the test folders share: the lab model, and the lab's simulators started once
per session (frozen clocks, so every protocol serves the same snapshot)."""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence

import pytest

from lightwarden.fixtures.lab.model import LAB_ENV, Lab, LabClock
from lightwarden.fixtures.lab.server import LabServers
from lightwarden.fixtures.lab.snmp_agent import LabSnmpAgent

HOUR = 3600.0


@pytest.fixture(scope="session")
def lab() -> Lab:
    """The fictional Quillmoor lab, loaded once."""
    return Lab.load()


@pytest.fixture(scope="session")
def lab_env() -> Iterator[None]:
    """The lab's secrets in the environment, where its site config refers to them."""
    with pytest.MonkeyPatch.context() as mp:
        for key, value in LAB_ENV.items():
            mp.setenv(key, value)
        yield


@pytest.fixture(scope="session")
def frozen_lab_servers(lab: Lab) -> Iterator[LabServers]:
    """Every lab switch over SNMP and SSH, lab time standing still at the epoch."""
    with LabServers(lab, clock=LabClock(lab.epoch, speed=0.0), base_port=0) as running:
        yield running


AgentFactory = Callable[..., LabSnmpAgent]


@pytest.fixture(scope="session")
def lab_snmp_agent(lab: Lab) -> Iterator[AgentFactory]:
    """``lab_snmp_agent(at_hours, devices=None)``: a lab SNMP agent frozen at that lab
    hour, started once per (hour, devices) for the whole session."""
    started: dict[tuple[float, tuple[str, ...] | None], LabSnmpAgent] = {}

    def get(at_hours: float, devices: Sequence[str] | None = None) -> LabSnmpAgent:
        key = (at_hours, tuple(devices) if devices is not None else None)
        if key not in started:
            clock = LabClock(lab.epoch + at_hours * HOUR, speed=0.0)
            kwargs = {"devices": list(devices)} if devices is not None else {}
            agent = LabSnmpAgent(lab, clock, refresh_s=3600.0, **kwargs)
            agent.start()
            started[key] = agent
        return started[key]

    yield get
    for agent in started.values():
        agent.stop()
