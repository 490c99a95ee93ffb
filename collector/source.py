"""What the poll schedule needs from a device source (SNMP, SSH, ...)."""

from __future__ import annotations

from typing import Protocol, runtime_checkable

from lightwarden.collector.readings import PollOutcome


@runtime_checkable
class PollSource(Protocol):
    """One device's source of readings.

    ``poll`` must not raise for device trouble: failures come back as a PollOutcome with
    ``error``/``error_kind`` set and a message that names the device and carries no secret.
    ``now`` is the wall-clock time of the poll, passed in so sources never read clocks.
    """

    @property
    def name(self) -> str: ...

    async def poll(self, now: float) -> PollOutcome: ...

    def close(self) -> None:
        """Release what this source holds (sessions, transports); called once at the end."""
        ...
