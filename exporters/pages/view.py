"""What the pages read from a running monitor: a small read-only view, nothing more."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Protocol

from lightwarden.collector.readings import PollOutcome, Quantity
from lightwarden.exporters.store.history import History
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.consistency import Finding
from lightwarden.rules.findings import AlertEvent, Assessment
from lightwarden.rules.plant import Plant


@dataclass(slots=True, frozen=True)
class LinkLoss:
    """One lane's span, seen from this port: measured both ways and as built (dB)."""

    far: str  # "device port" of the far end
    loss_in_db: float | None  # far Tx - Rx here
    loss_out_db: float | None  # Tx here - far Rx
    engineered_db: float | None  # the plant record's budget for the span


@dataclass(slots=True)
class DeviceView:
    """The latest poll of one device, as the check command and status page read it."""

    outcome: PollOutcome
    assessment: Assessment | None
    #: Facts from outside the poll the advice used (far end, span loss), by
    #: (port, lane, quantity), so check and the page advise as the alerts do
    contexts: Mapping[tuple[str, int, Quantity], AdviceContext] = field(default_factory=dict)
    #: The span behind each lane with a far end in the plant, by (port, lane)
    links: Mapping[tuple[str, int], LinkLoss] = field(default_factory=dict)


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
