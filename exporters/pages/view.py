"""What the pages read from a running monitor: a small read-only view, nothing more."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Protocol

from lightwarden.collector.readings import PollOutcome
from lightwarden.exporters.store.history import History
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.consistency import Finding
from lightwarden.rules.findings import AlertEvent, Assessment
from lightwarden.rules.plant import Plant


@dataclass(slots=True)
class DeviceView:
    """The latest poll of one device, as the check command and status page read it."""

    outcome: PollOutcome
    assessment: Assessment | None


class MonitorView(Protocol):
    @property
    def site(self) -> str: ...
    @property
    def targets(self) -> MarginTargets: ...
    @property
    def history(self) -> History | None: ...
    @property
    def views(self) -> Mapping[str, DeviceView]: ...

    def open_alerts(self) -> list[AlertEvent]: ...
    def link_issues(self) -> list[Finding]: ...
    def plant_with_history(self) -> Plant: ...
