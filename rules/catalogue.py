"""The PMD table: what each optical PMD promises about its light.

The table ships as ``pmd_catalogue.csv`` beside this module; a site may add rows of
its own (same columns) through :meth:`Catalogue.with_additions`. Every row carries a
``source`` string saying where its figures come from (IEEE 802.3 clause, MSA, common
practice, from memory), so a window built from it can say why it believes what it
believes.

A PMD may have several rows that differ by ``fibre`` (1000BASE-LX launches at least
-11.0 dBm on single-mode and -11.5 dBm on multimode fibre); the first row of a name is
its default. Names the decoders emit that are spelled differently from a row (WAN PHY
names, breakout descriptions such as "4x10GBASE-SR") resolve through :data:`ALIASES`
and the breakout rule; copper and PON names are listed in :data:`NOT_JUDGED` with the
reason no optical row applies.
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

from lightwarden.collector import units

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
    "fibre",
    "reach_om1_m",
    "reach_om2_m",
    "reach_om3_m",
    "reach_om4_m",
    "reach_engineered_m",
    "tx_oma_min_dbm",
    "rx_sens_oma_dbm",
    "er_min_db",
    "oma_clause",
    "lane_spread_tx_db",
    "lane_spread_rx_db",
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
    "reach_om1_m",
    "reach_om2_m",
    "reach_om3_m",
    "reach_om4_m",
    "reach_engineered_m",
    "tx_oma_min_dbm",
    "rx_sens_oma_dbm",
    "er_min_db",
    "lane_spread_tx_db",
    "lane_spread_rx_db",
)
_LENGTH_COLUMNS = (
    "reach_m", "reach_om1_m", "reach_om2_m", "reach_om3_m", "reach_om4_m",
    "reach_engineered_m",
)
FIBRES = ("smf", "mmf")

#: Names that are the same optics as a row under another name.
#: 10GBASE-SW/-LW/-EW: the WAN PHYs use the 10GBASE-S/-L/-E PMDs of IEEE 802.3 cl.52
#: unchanged (from memory).
ALIASES: dict[str, str] = {
    "10GBASE-SW": "10GBASE-SR",
    "10GBASE-LW": "10GBASE-LR",
    "10GBASE-EW": "10GBASE-ER",
}

#: Names the decoders can emit that no optical row describes, with the reason.
NOT_JUDGED: dict[str, str] = {
    "1000BASE-T": "twisted-pair copper (IEEE 802.3 cl.40): no optical levels",
    "1000BASE-CX": "shielded copper (IEEE 802.3 cl.39): no optical levels",
    "40GBASE-CR4": "twinaxial copper (IEEE 802.3 cl.85): no optical levels",
    "1000BASE-PX": (
        "a point-to-multipoint PON family (IEEE 802.3 cl.60) whose power class and "
        "direction (PX10/PX20, -U/-D) the module code does not say; add a site row"
    ),
}

#: PMDs made to run on the other fibre type too, with how (for consistency checks).
ALSO_RUNS_ON: dict[str, tuple[str, str]] = {
    "1000BASE-LX": ("mmf", "IEEE 802.3 cl.38: 550 m of multimode with a mode-conditioning "
                           "patch cord"),
    "1000BASE-LX10": ("mmf", "IEEE 802.3 cl.59: 550 m of multimode with a mode-conditioning "
                             "patch cord (from memory)"),
    "10GBASE-LRM": ("smf", "common practice: 1310 nm LRM parts commonly run on single-mode "
                           "jumpers and short runs; IEEE 802.3 cl.68 specifies multimode only "
                           "(from memory)"),
}

class CatalogueError(ValueError):
    """A PMD table (shipped or site-supplied) has a bad row; the message names where."""


_BREAKOUT = re.compile(r"^\s*(\d{1,2})\s*[xX]\s*(.+?)\s*$")
_GRADE = re.compile(r"^OM([1-5])$")


def avg_from_oma_mw(oma_mw: float, er_db: float) -> float:
    """Average power (mW) of a two-level signal of modulation amplitude ``oma_mw`` and
    extinction ratio ``er_db``: with r = P1/P0 and OMA = P1 - P0,
    P_avg = (P1 + P0) / 2 = OMA * (r + 1) / (2 (r - 1))."""
    if not er_db > 0.0 or not math.isfinite(er_db):
        raise ValueError(f"extinction ratio {er_db!r} dB must be a finite number above 0")
    r = math.pow(10.0, er_db / 10.0)  # a ratio of powers, not a power: no unit helper
    return oma_mw * (r + 1.0) / (2.0 * (r - 1.0))


def avg_from_oma_dbm(oma_dbm: float, er_db: float) -> float:
    """:func:`avg_from_oma_mw` in dBm: the OMA level plus 10 log10((r+1) / (2 (r-1)))."""
    return units.mw_to_dbm(avg_from_oma_mw(units.dbm_to_mw(oma_dbm), er_db))


def fibre_kind(text: str) -> str | None:
    """'smf' or 'mmf' for a fibre word or grade (OS1, OS2, G.652, OM1..OM5, SMF, MMF,
    9/125, 50/125, 62.5/125), else None."""
    word = text.strip().upper().replace(" ", "")
    if not word:
        return None
    if word in ("SMF", "SM", "SINGLEMODE", "SINGLE-MODE", "9/125") or word.startswith(
        ("OS", "G.65", "G65")
    ):
        return "smf"
    if word in ("MMF", "MM", "MULTIMODE", "MULTI-MODE", "50/125", "62.5/125") or \
            _GRADE.match(word):
        return "mmf"
    return None


@dataclass(slots=True, frozen=True)
class PmdSpec:
    """One PMD's row. Powers are per lane, average, in dBm; None where not stated.

    The OMA columns (``tx_oma_min_dbm``, ``rx_sens_oma_dbm``) and ``er_min_db`` hold what
    the standard states in optical modulation amplitude; the average-power columns stay
    the judged edges, because digital diagnostics report average power.
    """

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
    fibre: str = ""
    reach_om1_m: float | None = None
    reach_om2_m: float | None = None
    reach_om3_m: float | None = None
    reach_om4_m: float | None = None
    reach_engineered_m: float | None = None
    tx_oma_min_dbm: float | None = None
    rx_sens_oma_dbm: float | None = None
    er_min_db: float | None = None
    oma_clause: str = ""
    #: The most two lanes of a multi-lane PMD may differ by, Tx launch and Rx power, dB
    #: (the standard states them in OMA; the readings are average power)
    lane_spread_tx_db: float | None = None
    lane_spread_rx_db: float | None = None

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

    @property
    def has_power_figures(self) -> bool:
        """False for rows that name a PMD's band, reach and fibre but ship no levels."""
        return self.rx_overload_dbm is not None and self.rx_min_avg_dbm is not None

    # OMA -> average at the minimum extinction ratio. DERIVED and NEVER BINDING: a
    # part with a higher extinction ratio meets the OMA limit at a lower average power,
    # so these are shown beside the average edges, never used as edges.
    @property
    def rx_sens_avg_from_oma_dbm(self) -> float | None:
        """Average receive power at the OMA sensitivity and the minimum extinction ratio
        (derived, informative: never a judged edge)."""
        if self.rx_sens_oma_dbm is None or self.er_min_db is None:
            return None
        return avg_from_oma_dbm(self.rx_sens_oma_dbm, self.er_min_db)

    @property
    def tx_min_avg_from_oma_dbm(self) -> float | None:
        """Average launch power at the minimum OMA and the minimum extinction ratio
        (derived, informative: never a judged edge)."""
        if self.tx_oma_min_dbm is None or self.er_min_db is None:
            return None
        return avg_from_oma_dbm(self.tx_oma_min_dbm, self.er_min_db)

    @property
    def single_mode(self) -> bool | None:
        """True for a single-mode row, False for multimode, None if the row does not say."""
        if self.fibre == "smf":
            return True
        if self.fibre == "mmf":
            return False
        return None

    def runs_on(self, fibre: str) -> bool | None:
        """Whether this PMD is made for ``fibre`` (a kind or grade: 'smf', 'OS2', 'OM3').

        True for its own fibre kind and for the other kind where :data:`ALSO_RUNS_ON`
        lists it; None when the row or the fibre word does not say.
        """
        kind = fibre_kind(fibre)
        if kind is None or not self.fibre:
            return None
        if kind == self.fibre:
            return True
        other = ALSO_RUNS_ON.get(_key(self.name))
        return other is not None and other[0] == kind

    def reach_for(self, grade: str) -> float | None:
        """Reach in metres on a fibre grade (OS1/OS2/OM1..OM5, or 'smf'/'mmf').

        A multimode grade takes its own column; OM5 takes OM4's figure (OM5 is OM4 with
        an added 953 nm bandwidth spec: common practice). A row without per-grade columns
        gives ``reach_m`` for its own fibre kind. None where the row states no reach for
        that fibre.
        """
        kind = fibre_kind(grade)
        if kind is None:
            return None
        if self.fibre and kind != self.fibre:
            return None
        match = _GRADE.match(grade.strip().upper())
        if kind == "mmf" and match:
            by_grade = (self.reach_om1_m, self.reach_om2_m, self.reach_om3_m, self.reach_om4_m)
            number = min(int(match.group(1)), 4)
            if any(v is not None for v in by_grade):
                return by_grade[number - 1]
        return self.reach_m

    def wavelength_band(self) -> tuple[float, float] | None:
        """(min, max) nm of the transmit band, or None where the row gives none."""
        if self.wavelength_min_nm is None or self.wavelength_max_nm is None:
            return None
        return (self.wavelength_min_nm, self.wavelength_max_nm)

    def in_band(self, nm: float, tolerance_nm: float = 0.0) -> bool | None:
        """Whether ``nm`` lies in the band widened by ``tolerance_nm`` on each side
        (edges count as inside); None where the row gives no band or nm is not finite."""
        band = self.wavelength_band()
        if band is None or not math.isfinite(nm):
            return None
        return band[0] - tolerance_nm <= nm <= band[1] + tolerance_nm


def _key(name: str) -> str:
    return " ".join(name.strip().upper().split())


def _name_pattern(name: str) -> re.Pattern[str]:
    # Descriptions write "10GBASE-LR", "10GBase LR" or "10GBASE_LR"; a PMD name must not
    # be part of a longer word ("10GBASE-LR" inside "100GBASE-LR4" or "10GBASE-LRM"). A
    # breakout prefix ("4x10GBASE-SR") names the per-lane PMD.
    parts = [re.escape(p) for p in re.split(r"[-_ ]", name.strip()) if p]
    return re.compile(
        r"(?<![A-Za-z0-9])(?:\d{1,2} ?[xX] ?)?" + r"[-_ ]?".join(parts) + r"(?![A-Za-z0-9])",
        re.I,
    )


class Catalogue:
    """PMD rows by name (case-insensitive), immutable once built.

    ``get``/``[]`` give a name's default row (its first); :meth:`lookup` picks the variant
    for the plant's fibre or, for a direction-less BiDi name, the module's wavelength.
    Iteration yields every row, variants included.
    """

    __slots__ = ("_by_key", "_found", "_patterns", "_rows", "_variants")

    def __init__(self, specs: Iterable[PmdSpec] = ()) -> None:
        self._variants: dict[str, list[PmdSpec]] = {}
        for spec in specs:
            rows = self._variants.setdefault(_key(spec.name), [])
            rows[:] = [r for r in rows if r.fibre != spec.fibre] + [spec]
        self._by_key: dict[str, PmdSpec] = {k: v[0] for k, v in self._variants.items()}
        self._rows: tuple[PmdSpec, ...] = tuple(s for v in self._variants.values() for s in v)
        # Longest name first, so "10GBASE-LRM" wins over "10GBASE-LR" in one description.
        named = [(n, self._by_key[_key(t)]) for n, t in ALIASES.items() if _key(t) in self._by_key]
        named += [(s.name, s) for s in self._by_key.values()]
        self._patterns = sorted(
            ((_name_pattern(n), s) for n, s in named), key=lambda item: -len(item[0].pattern)
        )
        self._found: dict[str, PmdSpec | None] = {}

    def __len__(self) -> int:
        return len(self._rows)

    def __iter__(self) -> Iterator[PmdSpec]:
        return iter(self._rows)

    def __contains__(self, name: object) -> bool:
        return isinstance(name, str) and self.get(name) is not None

    def __getitem__(self, name: str) -> PmdSpec:
        spec = self.get(name)
        if spec is None:
            raise KeyError(f"PMD {name!r} is not in the catalogue")
        return spec

    def names(self) -> list[str]:
        """Every row name once, in table order."""
        return [s.name for s in self._by_key.values()]

    def variants(self, name: str) -> list[PmdSpec]:
        """Every row of one name (the default first); empty if none."""
        spec = self.get(name)
        return list(self._variants[_key(spec.name)]) if spec else []

    def get(self, name: str) -> PmdSpec | None:
        """The default row of an exact name, an alias or a breakout ("4x10GBASE-SR")."""
        if not name:
            return None
        key = _key(name)
        found = self._by_key.get(key)
        if found is None and key in ALIASES:
            found = self._by_key.get(_key(ALIASES[key]))
        if found is None:
            breakout = _BREAKOUT.match(key)
            if breakout and int(breakout.group(1)) > 1:
                return self.get(breakout.group(2))
        return found

    def not_judged_reason(self, name: str) -> str | None:
        """Why a known non-optical (or unclassed) name has no row, else None."""
        return NOT_JUDGED.get(_key(name)) if name else None

    def covers(self, name: str) -> bool:
        """A row, alias or breakout resolves the name, or :data:`NOT_JUDGED` explains it."""
        return self.get(name) is not None or self.not_judged_reason(name) is not None

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

    def lookup(
        self, pmd: str, fibre: str | None = None, wavelength_nm: float | None = None
    ) -> PmdSpec | None:
        """The row for ``pmd`` (exact name, alias or breakout first, then a name found in
        the text), as the variant for ``fibre`` (a kind or grade) when the table has one,
        else the default row. A direction-less BiDi name ("1000BASE-BX10") becomes the
        -D or -U row whose band holds ``wavelength_nm`` (the module's transmit
        wavelength), when given."""
        spec = self.get(pmd) or self.find_in_text(pmd)
        if spec is None:
            return None
        if wavelength_nm is not None and spec.wavelength_band() is None:
            for suffix in ("-D", "-U"):
                sided = self._by_key.get(_key(spec.name + suffix))
                if sided is not None and sided.in_band(wavelength_nm, 10.0):
                    spec = sided
                    break
        kind = fibre_kind(fibre) if fibre else None
        if kind is not None:
            for variant in self._variants[_key(spec.name)]:
                if variant.fibre == kind:
                    return variant
        return spec

    def with_additions(self, specs: Iterable[PmdSpec]) -> Catalogue:
        """A new catalogue with site rows added. A site row replaces every shipped row of
        the same name (all fibre variants: the site's figures win whatever the fibre; it
        may give its own variants), and its ``source`` column says whose figures they are."""
        site = list(specs)
        replaced = {_key(s.name) for s in site}
        kept = [s for s in self._rows if _key(s.name) not in replaced]
        return Catalogue([*kept, *site])


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

    Row numbers count lines as a spreadsheet shows them (the header is row 1). The
    columns after ``source`` are optional. A row may leave both Rx power cells empty (a
    PMD known by band, reach and fibre but with no levels shipped), never only one.
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
    seen: dict[tuple[str, str], int] = {}
    for offset, raw in enumerate(reader):
        rownum = offset + 2
        if None in raw:
            raise CatalogueError(f"{origin}: row {rownum}: more cells than header columns")
        row = {k: (v or "").strip() for k, v in raw.items()}
        if not any(row.values()):
            continue
        specs.append(_parse_row(row, origin, rownum, seen))
    return specs


def _parse_row(
    row: dict[str, str], origin: str, rownum: int, seen: dict[tuple[str, str], int]
) -> PmdSpec:
    def where(column: str) -> str:
        return f"{origin}: row {rownum}, column '{column}'"

    name = row.get("name", "")
    if not name:
        raise CatalogueError(f"{where('name')}: a PMD name is required")
    fibre = row.get("fibre", "").lower()
    if fibre not in ("", *FIBRES):
        raise CatalogueError(
            f"{where('fibre')}: {row['fibre']!r} is not a fibre kind; use smf, mmf or leave empty"
        )
    key = (_key(name), fibre)
    if key in seen:
        also = f" for fibre {fibre}" if fibre else ""
        raise CatalogueError(f"{where('name')}: {name!r} already defined{also} in row {seen[key]}")
    seen[key] = rownum
    values: dict[str, float | None] = {
        c: _parse_float(row.get(c, ""), where(c)) for c in _FLOAT_COLUMNS
    }
    lanes_text = row.get("lanes", "") or "1"
    try:
        lanes = int(lanes_text)
    except ValueError:
        raise CatalogueError(f"{where('lanes')}: {lanes_text!r} is not a whole number") from None
    if not 1 <= lanes <= 16:
        raise CatalogueError(f"{where('lanes')}: {lanes} lanes is outside 1..16")
    rx = ("rx_overload_dbm", "rx_min_avg_dbm")
    for column, other in (rx, rx[::-1]):
        if values[column] is None and values[other] is not None:
            raise CatalogueError(
                f"{where(column)}: a value is required when {other} is given "
                "(leave both empty for a row without receive levels)"
            )
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
    for column in _LENGTH_COLUMNS:
        length = values[column]
        if length is not None and length <= 0:
            raise CatalogueError(f"{where(column)}: a reach of {length} m must be above 0")
    er = values["er_min_db"]
    if er is not None and er <= 0:
        raise CatalogueError(
            f"{where('er_min_db')}: an extinction ratio of {er} dB must be above 0 dB"
        )
    if (values["tx_oma_min_dbm"] is not None or values["rx_sens_oma_dbm"] is not None) and \
            not (row.get("oma_clause") or row.get("clause")):
        raise CatalogueError(
            f"{where('oma_clause')}: OMA figures need the clause (or MSA) that states them"
        )
    return PmdSpec(
        name=name,
        clause=row.get("clause", ""),
        lanes=lanes,
        source=row["source"],
        fibre=fibre,
        oma_clause=row.get("oma_clause", ""),
        **values,
    )


@cache
def default_catalogue() -> Catalogue:
    """The shipped PMD table (read once per process)."""
    text = resources.files("lightwarden.rules").joinpath(CATALOGUE_FILE).read_text("utf-8")
    return Catalogue(parse_catalogue(text, CATALOGUE_FILE))
