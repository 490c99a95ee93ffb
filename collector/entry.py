"""What every source's device entry in the site config shares, and what a source's
``from_config`` is handed to build itself.

pydantic at the edge: these models validate the site config; sources themselves take
plain arguments. Secrets are never written inline: a secret field takes ``{env: NAME}``
or ``{file: PATH}`` and is read only when a source is built. Errors name the variable or
file, never its content, and pydantic's input echo is switched off.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Any, TypeVar, cast

from pydantic import BaseModel, ConfigDict, Field, model_validator

T = TypeVar("T")


class ConfigError(Exception):
    """A config problem, already worded for the operator (file, line, key, what is wrong)."""


class EntryModel(BaseModel):
    model_config = ConfigDict(extra="forbid", hide_input_in_errors=True, frozen=True)


class SecretRef(EntryModel):
    """Where a secret lives. Exactly one of ``env`` or ``file``."""

    env: str | None = None
    file: str | None = None

    @model_validator(mode="after")
    def _one_source(self) -> SecretRef:
        if (self.env is None) == (self.file is None):
            raise ValueError("give exactly one of 'env' or 'file'")
        return self

    def describe(self) -> str:
        return f"environment variable {self.env}" if self.env else f"file {self.file}"

    def read(self, base_dir: Path | None = None) -> str:
        if self.env is not None:
            value = os.environ.get(self.env)
            if value is None:
                raise ConfigError(f"environment variable {self.env} is not set")
            return value
        path = Path(self.file or "")
        if not path.is_absolute() and base_dir is not None:
            path = base_dir / path
        try:
            return path.read_text().strip()
        except OSError as exc:
            raise ConfigError(f"cannot read secret file {path}: {exc.strerror}") from None


def no_inline_secret(value: Any) -> Any:
    """A ``mode="before"`` validator: a bare string where a secret reference belongs."""
    if isinstance(value, str | int | float):
        raise ValueError(
            "inline secrets are not allowed; write {env: VARIABLE} or {file: PATH}"
        )
    return value


Secret = Annotated[SecretRef, Field(description="secret reference")]


class DeviceEntry(EntryModel):
    """The keys every device entry has, whatever its protocol."""

    name: str = Field(min_length=1)
    host: str
    port: int | None = Field(default=None, ge=1, le=65535)
    credentials: str
    interval_s: float | None = Field(default=None, gt=0)
    timeout_s: float | None = Field(default=None, gt=0)
    retries: int | None = Field(default=None, ge=0, le=10)
    #: PMD per port when the device does not say (port name -> IEEE PMD name)
    pmd: dict[str, str] = Field(default_factory=dict)


class SharedParts:
    """Long-lived parts several sources share (an SNMP engine pool, an SSH thread pool),
    made on first use and closed once when the monitor closes."""

    def __init__(self) -> None:
        self._parts: dict[str, Any] = {}
        self._closers: list[Callable[[], None]] = []

    def get(self, key: str, make: Callable[[], T], close: Callable[[T], None]) -> T:
        if key not in self._parts:
            part = make()
            self._parts[key] = part
            self._closers.append(lambda: close(part))
        # One key is always made by the same ``make``, so what it holds is a T.
        return cast(T, self._parts[key])

    def close(self) -> None:
        for closer in reversed(self._closers):
            closer()
        self._closers.clear()
        self._parts.clear()


@dataclass(slots=True)
class BuildContext:
    """What a source's ``from_config`` gets besides its own entry and credential."""

    base_dir: Path  # relative secret and platform paths resolve here
    timeout_s: float  # the site's poll defaults, for entries that do not set their own
    retries: int
    pmd_names: tuple[str, ...] = ()  # PMD names a device's text may mention
    shared: SharedParts = field(default_factory=SharedParts)
    #: relative state paths (the SSH known_hosts file) resolve here; None: base_dir
    state_dir: Path | None = None
