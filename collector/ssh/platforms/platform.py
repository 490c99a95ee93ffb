"""A CLI platform described as data: prompt, session commands, tables and their units.

A platform definition is a YAML file beside its TextFSM templates. This module holds the
pydantic model of that file and a loader whose errors name the file, the line and the key
(``qmos.yaml:14: diagnostics[0].columns.rx.unit: ...``), so that someone writing a
definition without reading our code can fix it. See README.md in this folder.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cached_property
from importlib import resources
from pathlib import Path
from typing import Annotated, Any, Literal

import textfsm
import yaml
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from lightwarden.collector.readings import Quantity

#: Units a column may be declared in, per quantity. Values are converted to reading units
#: (dBm, mA, C, V) by the parser.
POWER_UNITS = ("dBm", "mW", "uW")
BIAS_UNITS = ("mA", "uA")
UNITS_FOR: dict[Quantity, tuple[str, ...]] = {
    Quantity.RX_POWER: POWER_UNITS,
    Quantity.TX_POWER: POWER_UNITS,
    Quantity.BIAS: BIAS_UNITS,
    Quantity.TEMPERATURE: ("C",),
    Quantity.SUPPLY: ("V",),
}
#: Column-map keys for the quantities, in the order rows are emitted.
QUANTITY_KEYS: dict[str, Quantity] = {
    "rx": Quantity.RX_POWER,
    "tx": Quantity.TX_POWER,
    "bias": Quantity.BIAS,
    "temperature": Quantity.TEMPERATURE,
    "supply": Quantity.SUPPLY,
}
Unit = Literal["dBm", "mW", "uW", "mA", "uA", "C", "V"]
QuantityKey = Literal["rx", "tx", "bias", "temperature", "supply"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", hide_input_in_errors=True, frozen=True)


class Column(_Strict):
    """One measured column: the TextFSM value holding it and the unit it is shown in.

    Give ``unit`` when the column always uses one unit, or ``unit_value`` naming a
    TextFSM value that captures the unit text (for devices whose header says "rx mW" on
    some models and "rx dBm" on others).
    """

    value: str
    unit: Unit | None = None
    unit_value: str | None = None

    @model_validator(mode="after")
    def _one_unit_source(self) -> Column:
        if (self.unit is None) == (self.unit_value is None):
            raise ValueError("give exactly one of 'unit' or 'unit_value'")
        return self


class ReadingColumns(_Strict):
    port: str
    lane: str | None = None  # absent: every row is lane 1 (single-lane optics)
    rx: Column | None = None
    tx: Column | None = None
    bias: Column | None = None
    temperature: Column | None = None
    supply: Column | None = None

    def quantities(self) -> list[tuple[Quantity, Column]]:
        return [
            (q, c) for key, q in QUANTITY_KEYS.items() if (c := getattr(self, key)) is not None
        ]

    @model_validator(mode="after")
    def _units_fit(self) -> ReadingColumns:
        for key, q in QUANTITY_KEYS.items():
            col = getattr(self, key)
            if col is not None and col.unit is not None and col.unit not in UNITS_FOR[q]:
                allowed = ", ".join(UNITS_FOR[q])
                raise ValueError(f"{key}: unit {col.unit!r} does not fit; use one of {allowed}")
        if not self.quantities():
            raise ValueError("map at least one of rx, tx, bias, temperature, supply")
        return self


class ReadingsTable(_Strict):
    """A command whose output is one row per port (and lane) of live readings."""

    table: Literal["readings"]
    command: str
    template: str
    columns: ReadingColumns
    #: TextFSM value filled by the template's catch-all rule: lines nothing else matched.
    unmatched: str


class ThresholdColumns(_Strict):
    port: str
    quantity: str
    high_alarm: str | None = None
    low_alarm: str | None = None
    high_warning: str | None = None
    low_warning: str | None = None
    unit_value: str | None = None  # TextFSM value holding each row's unit


class ThresholdsTable(_Strict):
    """A command whose output is one row per port and quantity of declared thresholds."""

    table: Literal["thresholds"]
    command: str
    template: str
    columns: ThresholdColumns
    unmatched: str
    #: Word in the quantity column -> which quantity it is.
    quantity_words: dict[str, QuantityKey]
    #: Unit per quantity when the table has no unit column.
    units: dict[QuantityKey, Unit] = Field(default_factory=dict)

    @model_validator(mode="after")
    def _units_known(self) -> ThresholdsTable:
        if self.columns.unit_value is None:
            missing = sorted(set(self.quantity_words.values()) - set(self.units))
            if missing:
                raise ValueError(
                    "without columns.unit_value, 'units' must give a unit for "
                    + ", ".join(missing)
                )
        for key, unit in self.units.items():
            if unit not in UNITS_FOR[QUANTITY_KEYS[key]]:
                raise ValueError(f"units.{key}: unit {unit!r} does not fit this quantity")
        return self


DiagnosticsTable = Annotated[ReadingsTable | ThresholdsTable, Field(discriminator="table")]


class InventoryColumns(_Strict):
    port: str
    form_factor: str | None = None
    pmd: str | None = None
    part_number: str | None = None
    serial: str | None = None
    vendor: str | None = None
    wavelength_nm: str | None = None


class InventoryTable(_Strict):
    command: str
    template: str
    columns: InventoryColumns
    unmatched: str


class Session(_Strict):
    paging_off: list[str] = Field(default_factory=list)
    width: list[str] = Field(default_factory=list)


class EepromCommand(_Strict):
    """A per-port command printing the module memory map as hex; ``{port}`` is replaced."""

    command: str

    @field_validator("command")
    @classmethod
    def _has_port(cls, v: str) -> str:
        if "{port}" not in v:
            raise ValueError("must contain '{port}' where the port name goes")
        return v


class Platform(_Strict):
    """One CLI platform. Templates are file names relative to the definition file."""

    name: str = Field(pattern=r"^[a-z0-9][a-z0-9_-]*$")
    description: str = ""
    #: Regex matching the prompt; it must be anchored at the end of output (end with '$').
    prompt: str
    session: Session = Field(default_factory=Session)
    diagnostics: list[DiagnosticsTable] = Field(min_length=1)
    inventory: InventoryTable | None = None
    eeprom: EepromCommand | None = None
    #: Cell texts meaning "no light" in a power column (compared case-insensitively).
    no_light: list[str] = Field(default_factory=lambda: ["-inf", "--"])
    #: Cell texts meaning "this module or platform does not measure this".
    not_supported: list[str] = Field(default_factory=lambda: ["N/A"])
    #: Cell texts meaning "the sensor is there but is not reporting now".
    unavailable: list[str] = Field(default_factory=list)
    #: dBm readings at or below this are treated as no light (some CLIs print a floor).
    no_light_dbm: float | None = None
    #: How the device's error lines begin; such a line is reported as the device's
    #: answer instead of as a line the template did not understand.
    error_prefixes: list[Annotated[str, Field(min_length=1)]] = Field(default_factory=list)
    #: How long one command may take, seconds, unless the site config overrides it.
    read_timeout_s: float = Field(default=20.0, gt=0)

    @field_validator("prompt")
    @classmethod
    def _anchored(cls, v: str) -> str:
        try:
            re.compile(v)
        except re.error as exc:
            raise ValueError(f"not a valid regular expression ({exc})") from None
        if not (v.endswith("$") or v.endswith(r"\Z")):
            raise ValueError("must be anchored at the end of output: end the pattern with '$'")
        return v

    @cached_property
    def prompt_re(self) -> re.Pattern[str]:
        return re.compile(self.prompt)

    # Set by the loader: the folder holding the definition (templates are relative to it).
    _base_dir: Path | None = None

    @property
    def base_dir(self) -> Path:
        return self._base_dir if self._base_dir is not None else Path(".")

    def template_path(self, name: str) -> Path:
        return self.base_dir / name

    def is_error_line(self, line: str) -> bool:
        """Whether ``line`` is one of the device's error messages (by ``error_prefixes``)."""
        shown = line.lstrip()
        return any(shown.startswith(prefix) for prefix in self.error_prefixes)

    def readings_tables(self) -> list[ReadingsTable]:
        return [t for t in self.diagnostics if isinstance(t, ReadingsTable)]

    def thresholds_tables(self) -> list[ThresholdsTable]:
        return [t for t in self.diagnostics if isinstance(t, ThresholdsTable)]

    def commands(self) -> list[str]:
        """Every table command, in the order a poll runs them (inventory first)."""
        cmds = [self.inventory.command] if self.inventory else []
        return cmds + [t.command for t in self.diagnostics]


# -- loading ---------------------------------------------------------------------------


class PlatformError(ValueError):
    """A definition that cannot be used; ``str()`` names the file, line and key."""

    def __init__(self, file: str, line: int | None, key: str, message: str):
        self.file, self.line, self.key, self.message = file, line, key, message
        where = f"{file}:{line}" if line is not None else file
        super().__init__(f"{where}: {key}: {message}" if key else f"{where}: {message}")


@dataclass(slots=True)
class _Located:
    """Line numbers (1-based) of every key path in a YAML document."""

    lines: dict[tuple[str | int, ...], int]

    def line_of(self, loc: tuple[str | int, ...]) -> int | None:
        # Pydantic may report a path deeper than the document (a missing key, or a
        # union member's tag): fall back to the nearest ancestor that exists.
        for n in range(len(loc), -1, -1):
            line = self.lines.get(tuple(loc[:n]))
            if line is not None:
                return line
        return None


def _index_nodes(
    node: yaml.Node,
    path: tuple[str | int, ...],
    out: dict[tuple[str | int, ...], int],
    dupes: list[tuple[tuple[str | int, ...], int]],
) -> None:
    out.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        seen: set[str] = set()
        for key_node, value_node in node.value:
            key = key_node.value
            if key in seen:
                dupes.append(((*path, key), key_node.start_mark.line + 1))
            seen.add(key)
            out[(*path, key)] = key_node.start_mark.line + 1
            _index_nodes(value_node, (*path, key), out, dupes)
            out[(*path, key)] = key_node.start_mark.line + 1
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            _index_nodes(item, (*path, i), out, dupes)


def _key_text(loc: tuple[str | int, ...]) -> str:
    text = ""
    for part in loc:
        text += f"[{part}]" if isinstance(part, int) else (f".{part}" if text else str(part))
    return text


def _clean_loc(
    loc: tuple[str | int, ...], lines: dict[tuple[str | int, ...], int]
) -> tuple[str | int, ...]:
    # Pydantic inserts parts the author never wrote (a tagged union's tag such as
    # "readings", validator wrappers): keep only parts present in the YAML, plus the
    # last one (a missing key is reported by its own name).
    kept: tuple[str | int, ...] = ()
    for i, part in enumerate(loc):
        if (*kept, part) in lines or i == len(loc) - 1:
            kept = (*kept, part)
    return kept


def parse_platform(text: str, file: str, base_dir: Path | None = None) -> Platform:
    """Validate a definition given as text; ``file`` is only used in error messages."""
    try:
        root = yaml.compose(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = mark.line + 1 if mark is not None else None
        problem = getattr(exc, "problem", None) or "not valid YAML"
        raise PlatformError(file, line, "", f"YAML syntax: {problem}") from None
    if root is None or not isinstance(root, yaml.MappingNode):
        raise PlatformError(file, 1, "", "the file must hold a mapping (key: value lines)")
    lines: dict[tuple[str | int, ...], int] = {}
    dupes: list[tuple[tuple[str | int, ...], int]] = []
    _index_nodes(root, (), lines, dupes)
    if dupes:
        path, line = dupes[0]
        raise PlatformError(file, line, _key_text(path), "key given twice")
    located = _Located(lines)
    data = yaml.safe_load(text)
    try:
        platform = Platform.model_validate(data)
    except ValidationError as exc:
        err = exc.errors(include_url=False, include_input=False)[0]
        loc = _clean_loc(tuple(err["loc"]), lines)
        msg = err["msg"].removeprefix("Value error, ")
        if err["type"] == "extra_forbidden":
            msg = "unknown key (check the spelling; see README.md for the fields)"
        elif err["type"] == "missing":
            msg = "required key is missing"
        raise PlatformError(file, located.line_of(loc), _key_text(loc), msg) from None
    platform._base_dir = base_dir
    if base_dir is not None:
        _check_templates(platform, file, located)
    return platform


def _template_values(path: Path) -> set[str]:
    with path.open(encoding="utf-8") as fh:
        return set(textfsm.TextFSM(fh).header)


def _check_templates(platform: Platform, file: str, located: _Located) -> None:
    """Every template exists, compiles, and declares every value the column map names."""
    tables: list[tuple[tuple[str | int, ...], Any]] = [
        (("diagnostics", i), t) for i, t in enumerate(platform.diagnostics)
    ]
    if platform.inventory is not None:
        tables.append((("inventory",), platform.inventory))
    for loc, table in tables:
        path = platform.template_path(table.template)
        tloc = (*loc, "template")
        if not path.is_file():
            raise PlatformError(
                file, located.line_of(tloc), _key_text(tloc), f"template file {path} not found"
            )
        try:
            names = _template_values(path)
        except (textfsm.TextFSMTemplateError, OSError, UnicodeDecodeError) as exc:
            raise PlatformError(
                file, located.line_of(tloc), _key_text(tloc),
                f"template {path.name} does not compile: {exc}",
            ) from None
        refs: list[tuple[tuple[str | int, ...], str]] = [((*loc, "unmatched"), table.unmatched)]
        for key, value in table.columns:
            if isinstance(value, Column):
                refs.append(((*loc, "columns", key, "value"), value.value))
                if value.unit_value:
                    refs.append(((*loc, "columns", key, "unit_value"), value.unit_value))
            elif isinstance(value, str):
                refs.append(((*loc, "columns", key), value))
        for rloc, name in refs:
            if name not in names:
                raise PlatformError(
                    file, located.line_of(rloc), _key_text(rloc),
                    f"template {path.name} has no Value named {name!r} "
                    f"(it declares {', '.join(sorted(names))})",
                )


def load_platform(source: str | Path) -> Platform:
    """Load a definition by path, or a shipped one by name (``"qmos"``)."""
    path = Path(source)
    if path.suffix not in (".yaml", ".yml") and len(path.parts) == 1:
        shipped = resources.files("lightwarden.collector.ssh.platforms").joinpath(f"{source}.yaml")
        if not shipped.is_file():
            raise PlatformError(str(source), None, "", f"no shipped platform named {source!r}")
        path = Path(str(shipped))
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise PlatformError(str(path), None, "", f"cannot read: {exc.strerror}") from None
    except UnicodeDecodeError:
        raise PlatformError(str(path), None, "", "not UTF-8 text") from None
    return parse_platform(text, str(path), base_dir=path.parent)


def shipped_platforms() -> list[str]:
    folder = resources.files("lightwarden.collector.ssh.platforms")
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".yaml"))
