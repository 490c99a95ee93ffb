"""The IEEE 802.3 PMD table: what each optical PMD promises about its light.

The table ships as ``pmd_catalogue.csv`` beside this module; a site may add rows of
its own (same columns) through :meth:`Catalogue.with_additions`. Every row carries a
``source`` string saying where its figures come from, so a window built from it can
say why it believes what it believes.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from functools import cache
from importlib import resources

CATALOGUE_FILE = "pmd_catalogue.csv"

COLUMNS = (
    "name",
    "clause",
    "wavelength_min_nm",
    "wavelength_max_nm",
    "reach_m",
    "lanes",
    "tx_min_dbm",
    "tx_max_dbm",
    "rx_overload_dbm",
    "rx_min_avg_dbm",
    "source",
)
_REQUIRED = ("name", "rx_overload_dbm", "rx_min_avg_dbm", "source")
_FLOAT_COLUMNS = (
    "wavelength_min_nm",
    "wavelength_max_nm",
    "reach_m",
    "tx_min_dbm",
    "tx_max_dbm",
    "rx_overload_dbm",
    "rx_min_avg_dbm",
)


class CatalogueError(ValueError):
    """A PMD table (shipped or site-supplied) has a bad row; the message names where."""


@dataclass(slots=True, frozen=True)
class PmdSpec:
    """One PMD's row. Powers are per lane, average, in dBm; None where not stated."""

    name: str
    clause: str
    wavelength_min_nm: float | None
    wavelength_max_nm: float | None
    reach_m: float | None
    lanes: int
    tx_min_dbm: float | None
    tx_max_dbm: float | None
    rx_overload_dbm: float | None
    rx_min_avg_dbm: float | None
    source: str

    @property
    def power_budget_db(self) -> float | None:
        """Minimum launch power minus minimum average receive power."""
        if self.tx_min_dbm is None or self.rx_min_avg_dbm is None:
            return None
        return self.tx_min_dbm - self.rx_min_avg_dbm

    @property
    def rx_window_db(self) -> float | None:
        """Width of the receive window, overload minus minimum average receive power."""
        if self.rx_overload_dbm is None or self.rx_min_avg_dbm is None:
            return None
        return self.rx_overload_dbm - self.rx_min_avg_dbm


def _key(name: str) -> str:
    return name.strip().upper()


def _name_pattern(name: str) -> re.Pattern[str]:
    # Descriptions write "10GBASE-LR", "10GBase LR" or "10GBASE_LR"; a PMD name must not
    # be part of a longer word ("10GBASE-LR" inside "100GBASE-LR4" or "10GBASE-LRM").
    parts = [re.escape(p) for p in re.split(r"[-_ ]", name.strip()) if p]
    return re.compile(r"(?<![A-Za-z0-9])" + r"[-_ ]?".join(parts) + r"(?![A-Za-z0-9])", re.I)


class Catalogue:
    """PMD rows by name (case-insensitive), immutable once built."""

    __slots__ = ("_by_key", "_found", "_patterns")

    def __init__(self, specs: Iterable[PmdSpec] = ()) -> None:
        self._by_key: dict[str, PmdSpec] = {}
        for spec in specs:
            self._by_key[_key(spec.name)] = spec
        # Longest name first, so "10GBASE-LRM" wins over "10GBASE-LR" in one description.
        self._patterns = sorted(
            ((_name_pattern(s.name), s) for s in self._by_key.values()),
            key=lambda item: -len(item[1].name),
        )
        self._found: dict[str, PmdSpec | None] = {}

    def __len__(self) -> int:
        return len(self._by_key)

    def __iter__(self) -> Iterator[PmdSpec]:
        return iter(self._by_key.values())

    def __contains__(self, name: object) -> bool:
        return isinstance(name, str) and _key(name) in self._by_key

    def __getitem__(self, name: str) -> PmdSpec:
        try:
            return self._by_key[_key(name)]
        except KeyError:
            raise KeyError(f"PMD {name!r} is not in the catalogue") from None

    def get(self, name: str) -> PmdSpec | None:
        return self._by_key.get(_key(name)) if name else None

    def find_in_text(self, text: str) -> PmdSpec | None:
        """The longest PMD name that appears as a word in a free-text description."""
        if not text:
            return None
        if text in self._found:
            return self._found[text]
        found = None
        for pattern, spec in self._patterns:
            if pattern.search(text):
                found = spec
                break
        if len(self._found) < 4096:  # descriptions repeat across a fleet; bound the memo
            self._found[text] = found
        return found

    def lookup(self, pmd: str) -> PmdSpec | None:
        """Exact name first, then a name found inside the text ("10GBASE-LR SFP+")."""
        return self.get(pmd) or self.find_in_text(pmd)

    def with_additions(self, specs: Iterable[PmdSpec]) -> Catalogue:
        """A new catalogue with site rows added; a site row replaces a shipped row of the
        same name (its ``source`` column then says whose figures they are)."""
        return Catalogue([*self._by_key.values(), *specs])


def _parse_float(text: str, where: str) -> float | None:
    text = text.strip()
    if not text:
        return None
    try:
        value = float(text)
    except ValueError:
        raise CatalogueError(f"{where}: {text!r} is not a number") from None
    if not math.isfinite(value):
        raise CatalogueError(f"{where}: {text!r} is not a finite number")
    return value


def parse_catalogue(text: str, origin: str = CATALOGUE_FILE) -> list[PmdSpec]:
    """Parse PMD rows from CSV text. Errors name the origin, row number and column.

    Row numbers count lines as a spreadsheet shows them (the header is row 1).
    """
    reader = csv.DictReader(io.StringIO(text))
    header = [h.strip() for h in (reader.fieldnames or [])]
    if not header:
        raise CatalogueError(f"{origin}: empty file, expected a header row {','.join(COLUMNS)}")
    reader.fieldnames = header
    unknown = [h for h in header if h not in COLUMNS]
    if unknown:
        raise CatalogueError(
            f"{origin}: row 1: unknown column(s) {', '.join(unknown)}; "
            f"known columns are {', '.join(COLUMNS)}"
        )
    missing = [c for c in _REQUIRED if c not in header]
    if missing:
        raise CatalogueError(f"{origin}: row 1: missing column(s) {', '.join(missing)}")

    specs: list[PmdSpec] = []
    seen: dict[str, int] = {}
    for offset, raw in enumerate(reader):
        rownum = offset + 2
        if None in raw:
            raise CatalogueError(f"{origin}: row {rownum}: more cells than header columns")
        row = {k: (v or "").strip() for k, v in raw.items()}
        if not any(row.values()):
            continue

        def where(column: str, rownum: int = rownum) -> str:
            return f"{origin}: row {rownum}, column '{column}'"

        name = row.get("name", "")
        if not name:
            raise CatalogueError(f"{where('name')}: a PMD name is required")
        if _key(name) in seen:
            raise CatalogueError(
                f"{where('name')}: {name!r} already defined in row {seen[_key(name)]}"
            )
        seen[_key(name)] = rownum
        values: dict[str, float | None] = {
            c: _parse_float(row.get(c, ""), where(c)) for c in _FLOAT_COLUMNS
        }
        lanes_text = row.get("lanes", "") or "1"
        try:
            lanes = int(lanes_text)
        except ValueError:
            raise CatalogueError(
                f"{where('lanes')}: {lanes_text!r} is not a whole number"
            ) from None
        if not 1 <= lanes <= 16:
            raise CatalogueError(f"{where('lanes')}: {lanes} lanes is outside 1..16")
        for column in ("rx_overload_dbm", "rx_min_avg_dbm"):
            if values[column] is None:
                raise CatalogueError(f"{where(column)}: a value is required")
        if not row.get("source"):
            raise CatalogueError(f"{where('source')}: say where the figures come from")
        for low, high in (
            ("rx_min_avg_dbm", "rx_overload_dbm"),
            ("tx_min_dbm", "tx_max_dbm"),
            ("wavelength_min_nm", "wavelength_max_nm"),
        ):
            lo, hi = values[low], values[high]
            if lo is not None and hi is not None and lo >= hi:
                raise CatalogueError(f"{where(low)}: {lo} is not below {high} {hi}")
        specs.append(
            PmdSpec(
                name=name,
                clause=row.get("clause", ""),
                lanes=lanes,
                source=row["source"],
                **values,
            )
        )
    return specs


@cache
def default_catalogue() -> Catalogue:
    """The shipped IEEE 802.3 PMD table (read once per process)."""
    text = resources.files("lightwarden.rules").joinpath(CATALOGUE_FILE).read_text("utf-8")
    return Catalogue(parse_catalogue(text, CATALOGUE_FILE))

