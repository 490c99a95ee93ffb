"""Which edges each reading is judged against, and who declared each of them.

Every reading gets **two judgements**, and its condition is the worse of the two:

- the **margin edges** (``low_edge``/``high_edge``): for Rx power the sensitivity and the
  overload, for Tx power the launch window. Where the PMD is known they come from the
  standard (the IEEE 802.3 row: what any compliant part guarantees, so what a margin
  target is measured from); where it is not, from the module's alarms. Margin targets
  (NEAR_OVERLOAD / NEAR_SENSITIVITY) and OVERLOADED / BELOW_SENSITIVITY use these.
  For the other quantities the margin edges are the alarm levels.
- the module's **declared levels** (``low_alarm``/``high_alarm``, ``low_warning``/
  ``high_warning``), what the module's own flags would say: past an alarm is ALARM,
  past a warning is WARNING, for Rx as for every other quantity.

A **site** override wins over both: an edge the site declares replaces that edge in both
judgements. Among overrides that match an optic, a port-level one (``port`` given) beats
a part-number one, which beats a device-wide one, which beats a site-wide one; a
lane-specific one beats a lane-less one of the same scope; among equals the later wins.

Why both, rather than the module before the standard (as before): module levels are
often looser than the standard (a typical 10GBASE-LR module declares a -18.2 dBm low Rx
alarm against the standard's -14.4 dBm), so a receiver 0.4 dB above the standard's edge
looked healthy; and module warnings sit inside the standard's window on the high side
(+0.5 dBm warning), so a receiver past its own warning flag looked healthy too. Judging
both, and showing both with their sources, says what the standard promises and what the
module itself would flag.

Module thresholds: a block whose low alarm is not below its high alarm (blank EEPROM
areas read as all zeros) is ignored, with a note. **Practice** fills warning edges only
when nothing else declares any edge of the quantity: temperature 0..70 C (commercial
case range) and supply 3.3 V +-5 %, so practice alone never raises more than a warning.

OMA: when the module reports Rx power as OMA, the standard's average-power edges are
never used for Rx; only the module's own thresholds (declared in the same terms), the
standard's OMA edges where the table has them, and site overrides apply.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace

from lightwarden.collector.readings import OpticIdentity, Quantity, Thresholds
from lightwarden.rules.catalogue import NOT_JUDGED, Catalogue, PmdSpec
from lightwarden.rules.findings import EDGE_COLUMNS, WindowSource

NAN = math.nan

#: Higher wins. PRACTICE's enum code (4) is not its rank.
PRECEDENCE = {
    WindowSource.NONE: 0,
    WindowSource.PRACTICE: 1,
    WindowSource.PMD_TABLE: 2,
    WindowSource.MODULE: 3,
    WindowSource.SITE: 4,
}

#: Across the two judgements a module level that crosses the standard's edge is the
#: bad declaration; only the site outranks the standard there.
_CROSS_RANK = {**PRECEDENCE, WindowSource.MODULE: PRECEDENCE[WindowSource.PMD_TABLE] - 1}

#: Common practice (standards.md "Rules of thumb"): commercial case temperature and Vcc.
PRACTICE_TEMPERATURE_C = (0.0, 70.0)
PRACTICE_SUPPLY_V = (3.3 * 0.95, 3.3 * 1.05)

EDGE_NAMES = EDGE_COLUMNS
_NONE6 = (WindowSource.NONE,) * 6
OMA_NOTE = "Rx power reported as OMA; PMD table edges are average power, not compared"


def _edge_words(quantity: Quantity) -> tuple[str, str, str, str]:
    if quantity is Quantity.RX_POWER:
        return ("sensitivity", "overload", "low warning", "high warning")
    if quantity is Quantity.TX_POWER:
        return ("launch minimum", "launch maximum", "low warning", "high warning")
    return ("low alarm", "high alarm", "low warning", "high warning")


@dataclass(slots=True, frozen=True, kw_only=True)
class WindowOverride:
    """A site's own edges for one quantity, scoped to a port, a part number or both.

    For Rx power, ``rx_sensitivity``/``rx_overload`` set the low/high edges (falling
    back to ``low_alarm``/``high_alarm`` when not given); other quantities use the
    alarm fields and must leave the ``rx_`` fields empty.
    """

    quantity: Quantity
    device: str | None = None
    port: str | None = None
    part_number: str | None = None
    lane: int | None = None
    low_alarm: float | None = None
    low_warning: float | None = None
    high_warning: float | None = None
    high_alarm: float | None = None
    rx_overload: float | None = None
    rx_sensitivity: float | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "quantity", Quantity(self.quantity))
        if self.quantity is not Quantity.RX_POWER and (
            self.rx_overload is not None or self.rx_sensitivity is not None
        ):
            raise ValueError(
                f"{self.describe()}: rx_overload/rx_sensitivity apply only to rx_power"
            )
        for name in ("low_alarm", "low_warning", "high_warning", "high_alarm",
                     "rx_overload", "rx_sensitivity"):
            value = getattr(self, name)
            if value is not None and not math.isfinite(value):
                raise ValueError(f"{self.describe()}: {name} is not a finite number")
        low, high = self.edges()[:2]
        if low is not None and high is not None and low >= high:
            raise ValueError(f"{self.describe()}: low edge {low} is not below high edge {high}")
        if self.lane is not None and self.lane < 0:
            raise ValueError(f"{self.describe()}: lane must be 0 or more")

    def describe(self) -> str:
        scope = [f"{k}={v}" for k in ("device", "port", "part_number", "lane")
                 if (v := getattr(self, k)) is not None]
        return f"override for {self.quantity.label} ({', '.join(scope) or 'whole site'})"

    def edges(self) -> tuple[float | None, float | None, float | None, float | None]:
        """(low edge, high edge, low warning, high warning) in reading units."""
        low, high = self.low_alarm, self.high_alarm
        if self.quantity is Quantity.RX_POWER:
            low = self.rx_sensitivity if self.rx_sensitivity is not None else low
            high = self.rx_overload if self.rx_overload is not None else high
        return (low, high, self.low_warning, self.high_warning)

    @property
    def specificity(self) -> tuple[bool, bool, bool, bool]:
        return (self.port is not None, self.part_number is not None,
                self.device is not None, self.lane is not None)


@dataclass(slots=True, frozen=True)
class Window:
    """Resolved edges for one (optic, lane, quantity); NaN where no edge is known.

    ``low_edge``/``high_edge`` are the margin edges, ``low_alarm``/``high_alarm`` and the
    warnings the declared levels (see the module doc); ``sources`` follows
    ``EDGE_COLUMNS``.
    """

    low_edge: float = NAN
    high_edge: float = NAN
    low_alarm: float = NAN
    high_alarm: float = NAN
    low_warning: float = NAN
    high_warning: float = NAN
    sources: tuple[WindowSource, ...] = _NONE6
    note: str = ""
    #: Rx only: the standard's OMA sensitivity as an average power at its minimum
    #: extinction ratio. Derived and never binding: shown beside the judged edges.
    oma_equivalent_dbm: float = NAN

    @property
    def source(self) -> WindowSource:
        """The most authoritative source contributing any edge (NONE if none)."""
        return max(self.sources, key=PRECEDENCE.__getitem__)

    def edge_source(self, edge: str) -> WindowSource:
        """Source of one edge by column name: "low_edge", "high_alarm", "low_warning", ..."""
        return self.sources[EDGE_COLUMNS.index(edge)]

    @property
    def edges(self) -> tuple[float, float, float, float, float, float]:
        return (self.low_edge, self.high_edge, self.low_alarm, self.high_alarm,
                self.low_warning, self.high_warning)


EMPTY_WINDOW = Window()


def total_window(window: Window, lanes: int) -> Window:
    """The window of a total-power reading over ``lanes`` equal lanes.

    Every per-lane edge in dBm moves up by 10 log10(lanes) (four equal lanes carry four
    times one lane's power: +6.0 dB; dB arithmetic, standards.md). A total hides one weak
    lane behind three good ones, so the note says it is judged on that assumption.
    """
    if lanes <= 1:
        return window
    shift = 10.0 * math.log10(lanes)
    note = (f"total power of {lanes} lanes: judged against the per-lane edges "
            f"+{shift:.1f} dB (assumes equal lanes; a weak lane can hide in a total)")
    lo, hi, lo_a, hi_a, lo_w, hi_w = (e + shift for e in window.edges)
    return Window(lo, hi, lo_a, hi_a, lo_w, hi_w, sources=window.sources,
                  note="; ".join(t for t in (window.note, note) if t),
                  oma_equivalent_dbm=window.oma_equivalent_dbm + shift)


@dataclass(slots=True, frozen=True)
class OpticWindows:
    """Every window of one optic: one per quantity, plus lane-specific exceptions."""

    pmd: PmdSpec | None
    by_quantity: tuple[Window, ...]  # indexed by Quantity code
    by_lane: Mapping[tuple[Quantity, int], Window] = field(default_factory=dict)

    def window(self, quantity: Quantity, lane: int = 0) -> Window:
        if self.by_lane:
            found = self.by_lane.get((quantity, lane))
            if found is not None:
                return found
        return self.by_quantity[quantity]


class OverrideIndex:
    """Site overrides indexed so one optic's matches cost a few dict lookups."""

    __slots__ = ("_by_device", "_by_part", "_by_port", "_site", "overrides")

    def __init__(self, overrides: Iterable[WindowOverride] = ()) -> None:
        self.overrides: tuple[WindowOverride, ...] = tuple(overrides)
        self._by_port: dict[str, list[int]] = {}
        self._by_part: dict[str, list[int]] = {}
        self._by_device: dict[str, list[int]] = {}
        self._site: list[int] = []
        for i, o in enumerate(self.overrides):
            if o.port is not None:
                self._by_port.setdefault(o.port.casefold(), []).append(i)
            elif o.part_number is not None:
                self._by_part.setdefault(o.part_number.strip().casefold(), []).append(i)
            elif o.device is not None:
                self._by_device.setdefault(o.device.casefold(), []).append(i)
            else:
                self._site.append(i)

    def __len__(self) -> int:
        return len(self.overrides)

    def matching(self, optic: OpticIdentity) -> tuple[int, ...]:
        """Indices of the overrides that apply to this optic, least specific first."""
        if not self.overrides:
            return ()
        device = optic.device.casefold()
        part = optic.part_number.strip().casefold()
        candidates: list[int] = []
        if self._by_port:
            candidates.extend(self._by_port.get(optic.port.casefold(), ()))
        if self._by_part and part:
            candidates.extend(self._by_part.get(part, ()))
        if self._by_device:
            candidates.extend(self._by_device.get(device, ()))
        candidates.extend(self._site)
        if not candidates:
            return ()
        found = []
        for i in candidates:
            o = self.overrides[i]
            if o.device is not None and o.device.casefold() != device:
                continue
            if o.part_number is not None and o.part_number.strip().casefold() != part:
                continue
            found.append(i)
        found.sort(key=lambda i: (self.overrides[i].specificity, i))
        return tuple(found)


def _clean(value: float | None) -> float | None:
    return value if value is not None and math.isfinite(value) else None


def _module_edges(
    quantity: Quantity, t: Thresholds | None
) -> tuple[tuple[float | None, ...], str]:
    if t is None:
        return (None, None, None, None), ""
    edges = (_clean(t.low_alarm), _clean(t.high_alarm), _clean(t.low_warning),
             _clean(t.high_warning))
    low, high = edges[0], edges[1]
    if low is not None and high is not None and low >= high:
        return (None, None, None, None), (
            f"module {quantity.label} thresholds ignored: low alarm {low:g} "
            f"is not below high alarm {high:g}"
        )
    return edges, ""


def _pmd_edges(quantity: Quantity, pmd: PmdSpec | None, oma: bool = False
               ) -> tuple[float | None, ...]:
    if pmd is None:
        return (None, None, None, None)
    if quantity is Quantity.RX_POWER:
        if oma:
            # Judged in its own terms: the standard's OMA sensitivity where it states one;
            # its overload is an average power, so no high edge from the standard.
            return (pmd.rx_sens_oma_dbm, None, None, None)
        return (pmd.rx_min_avg_dbm, pmd.rx_overload_dbm, None, None)
    if quantity is Quantity.TX_POWER:
        return (pmd.tx_min_dbm, pmd.tx_max_dbm, None, None)
    return (None, None, None, None)


def _practice_edges(quantity: Quantity) -> tuple[float | None, ...]:
    if quantity is Quantity.TEMPERATURE:
        return (None, None, *PRACTICE_TEMPERATURE_C)
    if quantity is Quantity.SUPPLY:
        return (None, None, *PRACTICE_SUPPLY_V)
    return (None, None, None, None)


def _site_edges(site: Sequence[WindowOverride]) -> list[float | None]:
    """(low, high, low warning, high warning) as the site declares them, per edge."""
    values: list[float | None] = [None, None, None, None]
    for k in range(4):
        # ``site`` is least specific first: the last override declaring the edge wins.
        for o in reversed(site):
            v = o.edges()[k]
            if v is not None:
                values[k] = v
                break
    return values


def _uncross(values: list[float | None], sources: list[WindowSource], lo: int, hi: int,
             words: tuple[str, str], notes: list[str],
             rank: Mapping[WindowSource, int] | None = None) -> None:
    low, high = values[lo], values[hi]
    if low is None or high is None or low < high:
        return
    # Edges from different sources crossed: keep the more authoritative one.
    rank = rank or PRECEDENCE
    drop, keep = (lo, hi) if rank[sources[lo]] < rank[sources[hi]] else (hi, lo)
    wd, wk = (words[0], words[1]) if drop == lo else (words[1], words[0])
    notes.append(
        f"{wd} {values[drop]:g} ({sources[drop].word}) dropped: it is not on "
        f"the right side of {wk} {values[keep]:g} ({sources[keep].word})"
    )
    values[drop], sources[drop] = None, WindowSource.NONE


def _merge(
    quantity: Quantity,
    site: Sequence[WindowOverride],
    module: tuple[float | None, ...],
    standard: tuple[float | None, ...],
    notes: list[str],
) -> Window:
    """Six edges with their sources; see the module doc for who wins where."""
    declared = _site_edges(site)
    values: list[float | None] = [None] * 6
    sources = [WindowSource.NONE] * 6
    for k in (0, 1):
        # Margin edges: site, else the standard, else the module's alarm.
        for v, src in ((declared[k], WindowSource.SITE), (standard[k], WindowSource.PMD_TABLE),
                       (module[k], WindowSource.MODULE)):
            if v is not None:
                values[k], sources[k] = v, src
                break
        # Declared levels: site, else the module (alarms, then warnings).
        for col, m in ((2 + k, k), (4 + k, 2 + k)):
            for v, src in ((declared[m], WindowSource.SITE), (module[m], WindowSource.MODULE)):
                if v is not None:
                    values[col], sources[col] = v, src
                    break
    if all(s is WindowSource.NONE for s in sources):
        practice = _practice_edges(quantity)
        if any(v is not None for v in practice):
            values[4], values[5] = practice[2], practice[3]
            sources[4] = sources[5] = WindowSource.PRACTICE
            what = ("commercial case temperature 0-70 C" if quantity is Quantity.TEMPERATURE
                    else "supply 3.3 V +-5 %")
            notes.append(f"no thresholds declared; warning edges from common practice ({what})")

    words = _edge_words(quantity)
    _uncross(values, sources, 0, 1, (words[0], words[1]), notes)
    if quantity in (Quantity.RX_POWER, Quantity.TX_POWER):
        _uncross(values, sources, 2, 3, ("low alarm", "high alarm"), notes)
        # A level on the wrong side of the other judgement's edge is a bad declaration
        # (it would flag every reading): the more authoritative of the two stays.
        _uncross(values, sources, 0, 3, (words[0], "high alarm"), notes, _CROSS_RANK)
        _uncross(values, sources, 2, 1, ("low alarm", words[1]), notes, _CROSS_RANK)

    used = {s for s in sources[:2] if s is not WindowSource.NONE}
    if len(used) > 1:
        notes.append(", ".join(f"{words[k]} from {sources[k].word}" for k in (0, 1)))
    low_edge, high_edge, low_alarm, high_alarm, low_warning, high_warning = (
        NAN if v is None else float(v) for v in values)
    return Window(
        low_edge, high_edge, low_alarm, high_alarm, low_warning, high_warning,
        sources=tuple(sources),
        note="; ".join(notes),
    )


def _resolve_quantity(
    quantity: Quantity,
    optic: OpticIdentity,
    pmd: PmdSpec | None,
    site: Sequence[WindowOverride],
) -> Window:
    notes: list[str] = []
    module, module_note = _module_edges(quantity, optic.thresholds.get(quantity))
    if module_note:
        notes.append(module_note)
    oma = optic.rx_power_type.strip().lower() == "oma"
    pmd_edges = _pmd_edges(quantity, pmd, oma)
    if quantity is Quantity.RX_POWER and oma and pmd is not None:
        if pmd_edges[0] is None and pmd.rx_min_avg_dbm is not None:
            declared = [o.edges()[:2] for o in site] + [module[:2]]
            if not all(any(e[k] is not None for e in declared) for k in (0, 1)):
                notes.append(OMA_NOTE)
        elif pmd_edges[0] is not None:
            clause = pmd.oma_clause or pmd.clause
            where = f"IEEE 802.3 cl.{clause}" if clause.isdigit() else (clause or "IEEE 802.3")
            notes.append(f"Rx judged in OMA: the standard's {pmd.name} OMA sensitivity "
                         f"{pmd_edges[0]:.1f} dBm ({where})")
    if quantity is Quantity.RX_POWER and pmd is not None and not oma:
        _note_looser_module(module, pmd, notes)
    if quantity in (Quantity.RX_POWER, Quantity.TX_POWER) and optic.pmd:
        if pmd is None:
            notes.append(_unknown_pmd_note(optic.pmd))
        elif not pmd.has_power_figures:
            notes.append(f"the PMD table names {pmd.name} ({pmd.source}) but holds no power "
                         "levels for it: judged by the module's own levels")
    window = _merge(quantity, site, module, pmd_edges, notes)
    if quantity is Quantity.RX_POWER and pmd is not None and not oma:
        derived = pmd.rx_sens_avg_from_oma_dbm
        if derived is not None:
            # Shown beside the average edges, never judged (see PmdSpec).
            window = replace(window, oma_equivalent_dbm=derived)
    return window


def _unknown_pmd_note(pmd: str) -> str:
    reason = NOT_JUDGED.get(pmd.strip().upper())
    if reason:
        return f"PMD {pmd!r} is not judged against the PMD table: {reason}"
    return f"PMD {pmd!r} is not in the PMD table"


def _note_looser_module(module: tuple[float | None, ...], pmd: PmdSpec, notes: list[str]) -> None:
    low, high = module[0], module[1]
    if low is not None and pmd.rx_min_avg_dbm is not None and low < pmd.rx_min_avg_dbm - 0.05:
        notes.append(
            f"module looser than the standard: Rx low alarm {low:.1f} dBm is "
            f"{pmd.rx_min_avg_dbm - low:.1f} dB below the {pmd.name} minimum average receive "
            f"power {pmd.rx_min_avg_dbm:.1f} dBm"
        )
    if high is not None and pmd.rx_overload_dbm is not None and high > pmd.rx_overload_dbm + 0.05:
        notes.append(
            f"module looser than the standard: Rx high alarm {high:.1f} dBm is "
            f"{high - pmd.rx_overload_dbm:.1f} dB above the {pmd.name} overload "
            f"{pmd.rx_overload_dbm:.1f} dBm"
        )


def _resolve(
    optic: OpticIdentity, catalogue: Catalogue, matched: Sequence[WindowOverride],
    fibre: str | None = None,
) -> OpticWindows:
    # The row for the plant's fibre (1000BASE-LX launches less on multimode) and, for a
    # direction-less BiDi name, the direction the module's wavelength says.
    pmd = catalogue.lookup(optic.pmd, fibre=fibre, wavelength_nm=optic.wavelength_nm) \
        if optic.pmd else None
    by_quantity = []
    lane_specific: dict[Quantity, set[int]] = {}
    for o in matched:
        if o.lane is not None:
            lane_specific.setdefault(o.quantity, set()).add(o.lane)
    for q in Quantity:
        site = [o for o in matched if o.quantity is q and o.lane is None]
        by_quantity.append(_resolve_quantity(q, optic, pmd, site))
    by_lane = {}
    for q, lanes in lane_specific.items():
        for lane in sorted(lanes):
            site = [o for o in matched if o.quantity is q and o.lane in (None, lane)]
            by_lane[(q, lane)] = _resolve_quantity(q, optic, pmd, site)
    return OpticWindows(pmd=pmd, by_quantity=tuple(by_quantity), by_lane=by_lane)


def resolve_windows(
    optic: OpticIdentity,
    catalogue: Catalogue,
    overrides: Iterable[WindowOverride] | OverrideIndex = (),
    fibre: str | None = None,
) -> OpticWindows:
    """All windows of one optic, with the source of every edge; ``fibre`` is the plant's
    fibre at its port (a kind or grade), when recorded."""
    index = overrides if isinstance(overrides, OverrideIndex) else OverrideIndex(overrides)
    return _resolve(optic, catalogue, [index.overrides[i] for i in index.matching(optic)],
                    fibre)


# (PMD, Rx power type, module thresholds, indices of the matching overrides)
_CacheKey = tuple[str, str, tuple[tuple[Quantity, Thresholds], ...], tuple[int, ...],
                  str | None, float | None]


class WindowResolver:
    """Resolves windows for many optics, once per distinct (PMD, Rx power type, module
    thresholds, matching overrides); a fleet has few distinct ones.

    Keep one per (catalogue, overrides) pair and reuse it across polls; build a new
    one when the config changes.
    """

    __slots__ = ("_cache", "catalogue", "fibre_of", "index", "max_entries")

    def __init__(
        self,
        catalogue: Catalogue,
        overrides: Iterable[WindowOverride] | OverrideIndex = (),
        max_entries: int = 65536,
        fibre_of: Mapping[tuple[str, str], str] | None = None,
    ) -> None:
        self.catalogue = catalogue
        self.index = overrides if isinstance(overrides, OverrideIndex) else OverrideIndex(overrides)
        self.max_entries = max_entries
        #: The plant's fibre per (device, port), so a PMD with rows per fibre type is
        #: judged by the row for the fibre it is on.
        self.fibre_of: Mapping[tuple[str, str], str] = fibre_of or {}
        self._cache: dict[_CacheKey, OpticWindows] = {}

    def __call__(self, optic: OpticIdentity) -> OpticWindows:
        matched = self.index.matching(optic)
        key: _CacheKey = (
            optic.pmd,
            optic.rx_power_type,
            # The collector fills thresholds in a fixed order, so no sort is needed; a
            # different order only costs a duplicate entry.
            tuple(optic.thresholds.items()),
            matched,
            self.fibre_of.get((optic.device, optic.port)) if self.fibre_of else None,
            optic.wavelength_nm,
        )
        cacheable = True
        try:
            found = self._cache.get(key)
        except TypeError:  # unhashable threshold values: resolve without caching
            found, cacheable = None, False
        if found is None:
            found = _resolve(optic, self.catalogue, [self.index.overrides[i] for i in matched],
                             key[4])
            if cacheable:
                if len(self._cache) >= self.max_entries:
                    self._cache.clear()
                self._cache[key] = found
        return found
