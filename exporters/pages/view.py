"""What the pages read from a running monitor: a small read-only view, nothing more."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Protocol

from lightwarden.collector.readings import PollOutcome, Quantity
from lightwarden.exporters.store.history import History
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.findings import AlertEvent, Assessment
from lightwarden.rules.plant import Plant
from lightwarden.rules.spanloss import LinkIssue


@dataclass(slots=True)
class DeviceView:
    """The latest poll of one device, as the check command and status page read it."""

    outcome: PollOutcome
    assessment: Assessment | None
    #: Facts from outside the poll the advice used (far end, span loss), by
    #: (port, lane, quantity), so check and the page advise as the alerts do
    contexts: Mapping[tuple[str, int, Quantity], AdviceContext] = field(default_factory=dict)


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
    def link_issues(self) -> list[LinkIssue]: ...
    def plant_with_history(self) -> Plant: ...
