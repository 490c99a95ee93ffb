"""Do the optics and the fibre plant belong together? Consistency findings per port and span.

Input is what we know without any power reading: each end's ``OpticIdentity`` (PMD name,
nominal wavelength), the PMD table, and the plant record (fibre type, length, mode-
conditioning cords). Output is a list of ``Finding``s, each naming the port (and, for a
span, both ends), a ``Mismatch`` kind, a ``Severity``, one line with the numbers and the
advice. A missing fact is never a fault: an unknown PMD or wavelength gives no finding.

Where the numbers come from (each also named beside its test):

- ITU-T G.694.1 DWDM grid: f = 193.1 THz + n x 0.05 THz (50 GHz) or n x 0.1 THz
  (100 GHz); wavelength = c / f with c = 299 792.458 nm*THz.
- ITU-T G.694.2 CWDM grid: 18 channels at 1271 + 20 k nm (k = 0..17, 1271..1611 nm).
  A centre is taken to be "on" a channel within +-6.5 nm (the usual CWDM channel
  tolerance, from memory); older parts label the same channels 1270..1610.
- BiDi pairs: 1310/1490 nm (1000BASE-BX10, IEEE 802.3 cl.59, band edges from memory),
  1310/1550 and 1270/1330 nm (standards.md "Rules of thumb", practice), 1490/1550 nm
  (long-reach gigabit BiDi, practice).
- Fibre: short-wave (SR/SX/SW) PMDs are multimode; 10GBASE-LRM is made for multimode
  (IEEE 802.3 cl.68); 1000BASE-LX runs on multimode only through a mode-conditioning
  patch cord at each end (IEEE 802.3 cl.38, from memory); other long-wave PMDs are
  single-mode.
- Reach: single-mode from the PMD table's ``reach_m``; multimode by fibre grade from
  ``MULTIMODE_REACH_M`` (IEEE 802.3 tables, from memory).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Collection, Iterable, Mapping
from dataclasses import dataclass
from enum import StrEnum
from functools import lru_cache

from lightwarden.collector.readings import OpticIdentity
from lightwarden.rules.catalogue import Catalogue, PmdSpec
from lightwarden.rules.findings import Severity
from lightwarden.rules.plant import Plant, PortRef
from lightwarden.rules.spanloss import MULTIMODE, SINGLEMODE, PlantSpan

#: The alert name of every consistency finding, pushed and in the generated rules alike.
ALERTNAME = "OpticLinkMismatch"


class Mismatch(StrEnum):
    """What does not belong together; the values are the words in metrics, JSON, pages."""

    PMD = "pmd-mismatch"  # the two ends advertise different PMDs
    OUT_OF_BAND = "wavelength-out-of-band"  # a module's wavelength is outside its PMD band
    WAVELENGTH = "wavelength-mismatch"  # duplex ends transmit in different windows
    BIDI_SAME = "bidi-same-wavelength"  # both BiDi ends transmit the same wavelength
    BIDI_NOT_COMPLEMENTARY = "bidi-not-complementary"  # not a BiDi pair we know
    CWDM_CHANNEL = "cwdm-channel-mismatch"  # ends on different G.694.2 channels
    DWDM_CHANNEL = "dwdm-channel-mismatch"  # ends on different G.694.1 channels
    FIBRE_TYPE = "fibre-type-mismatch"  # single-mode optic on multimode plant or the reverse
    BEYOND_REACH = "beyond-reach"  # span longer than the PMD's reach on that fibre
    PATCHING = "patching-differs"  # LLDP sees another far end than the plant record


@dataclass(slots=True, frozen=True)
class Finding:
    """One consistency problem. Span findings carry both ends: ``device``/``port`` is the
    plant record's A end, ``far_device``/``far_port`` its B end; a finding about one
    module alone leaves the far end empty."""

    kind: Mismatch
    severity: Severity
    device: str
    port: str
    far_device: str
    far_port: str
    text: str
    advice: str

    @property
    def key(self) -> str:
        """Stable identity across polls and instances (no instance id, no time)."""
        parts = (self.kind.value, self.device, self.port, self.far_device, self.far_port)
        return "link|" + "|".join(p.replace("%", "%25").replace("|", "%7C") for p in parts)

    def involves(self, device: str) -> bool:
        return device in (self.device, self.far_device)


# --- grids ------------------------------------------------------------------------------

C_NM_THZ = 299_792.458  # speed of light in nm*THz: lambda[nm] = C / f[THz]
DWDM_ANCHOR_THZ = 193.1  # ITU-T G.694.1
DWDM_FINE_GHZ = 50.0  # the finest common G.694.1 fixed grid
#: Below half the finest spacing two centres are the same channel; DDM wavelengths in whole
#: nm (SFF-8472 bytes 60-61) cannot tell 50 GHz neighbours apart, but same-channel parts
#: report the same number, and 100 GHz neighbours always differ by >= 1 nm.
DWDM_SAME_GHZ = DWDM_FINE_GHZ / 2
DWDM_BAND_NM = (1525.0, 1625.0)  # C and L bands, where the G.694.1 grid is used
CWDM_FIRST_NM, CWDM_STEP_NM, CWDM_CHANNELS = 1271.0, 20.0, 18  # ITU-T G.694.2
CWDM_TOLERANCE_NM = 6.5  # usual channel tolerance (from memory)
#: 1310 and 1550 nm are also the windows of uncoloured parts: a pair drawn only from these
#: two channels is a plain wavelength mismatch, not a CWDM one.
_PLAIN_WINDOWS = (1311.0, 1551.0)

#: A nominal wavelength this far outside its PMD's band is out of band. Modules advertise
#: a nominal centre in whole nm, and several band edges in the table are from memory: the
#: slack keeps those from flagging a good part, while a 1550 nm part coded 1000BASE-LX
#: (1270..1355 nm) is far outside. Our choice.
BAND_SLACK_NM = 10.0
#: Two duplex ends within this of each other share a window (the 1310 nm window alone is
#: 100 nm wide); closer CWDM/DWDM differences are caught by the grid checks first.
SAME_WINDOW_NM = 20.0
#: Two BiDi ends this close transmit the same wavelength.
BIDI_SAME_NM = 10.0
#: Short-wave (850 nm window) below this; the receivers there are blind to 1310/1550 nm.
SHORT_WAVE_MAX_NM = 1000.0


def dwdm_frequency_thz(wavelength_nm: float) -> float:
    """Optical frequency of a vacuum wavelength (ITU-T G.694.1 states its grid in THz)."""
    return C_NM_THZ / wavelength_nm


def dwdm_channel(wavelength_nm: float, spacing_ghz: float = DWDM_FINE_GHZ) -> float:
    """The nearest G.694.1 grid frequency, THz: 193.1 + n x spacing."""
    step = spacing_ghz / 1000.0
    n = round((dwdm_frequency_thz(wavelength_nm) - DWDM_ANCHOR_THZ) / step)
    return DWDM_ANCHOR_THZ + n * step


def cwdm_channel(wavelength_nm: float) -> float | None:
    """The G.694.2 channel centre (1271..1611 nm) within tolerance, else None."""
    k = round((wavelength_nm - CWDM_FIRST_NM) / CWDM_STEP_NM)
    if not 0 <= k < CWDM_CHANNELS:
        return None
    centre = CWDM_FIRST_NM + k * CWDM_STEP_NM
    return centre if abs(wavelength_nm - centre) <= CWDM_TOLERANCE_NM else None


# --- BiDi ---------------------------------------------------------------------------------

Band = tuple[float, float]
#: Complementary transmit bands of single-fibre BiDi pairs (either end may hold either).
BIDI_PAIRS: tuple[tuple[Band, Band], ...] = (
    ((1260.0, 1360.0), (1480.0, 1500.0)),  # 1310/1490: 1000BASE-BX10 (cl.59, from memory)
    ((1260.0, 1360.0), (1540.0, 1560.0)),  # 1310/1550: practice (standards.md)
    ((1480.0, 1500.0), (1540.0, 1560.0)),  # 1490/1550: practice (long-reach gigabit)
    ((1260.0, 1280.0), (1320.0, 1340.0)),  # 1270/1330: practice (standards.md)
)

_BIDI_PMD = re.compile(r"(?:-B[XR]\d*|BIDI)", re.IGNORECASE)
_BIDI_SIDE = re.compile(r"-[UD]$", re.IGNORECASE)
_BREAKOUT = re.compile(r"^\d+X(?=\d)", re.IGNORECASE)  # "4x10GBASE-SR" -> "10GBASE-SR"
#: Two wavelengths on each fibre of a duplex pair (IEEE 802.3cm "SR4.2"/"SR1.2" style).
_DUAL_WAVELENGTH = re.compile(r"SR\d*\.2\b", re.IGNORECASE)


@dataclass(slots=True, frozen=True)
class _Facts:
    """What the checks read from one identity, worked out once per distinct part."""

    bidi: bool
    dual: bool
    base: str
    fibre: str | None


@lru_cache(maxsize=4096)  # a fleet holds few distinct (PMD, wavelength, part) triples
def _facts(pmd: str, nm: float | None, part_number: str) -> _Facts:
    bidi = bool(_BIDI_PMD.search(pmd) or "BIDI" in part_number.upper())
    dual = bool(_DUAL_WAVELENGTH.search(pmd)) or (
        bidi and nm is not None and nm < SHORT_WAVE_MAX_NM)
    base = base_pmd(pmd)
    return _Facts(bidi, dual, base, _fibre_kind(base, nm))


def _of(optic: OpticIdentity) -> _Facts:
    return _facts(optic.pmd, optic.wavelength_nm, optic.part_number)


def is_bidi(optic: OpticIdentity) -> bool:
    """A BiDi part by its PMD name or part number ("-BX10", "-BR20", "BIDI")."""
    return _of(optic).bidi


def is_dual_wavelength_duplex(optic: OpticIdentity) -> bool:
    """A short-reach "BiDi" that sends two short-wave wavelengths over each fibre of a
    duplex pair (e.g. 850/900 nm 40G parts): identical at both ends, not a pair."""
    return _of(optic).dual


def bidi_complementary(w1: float, w2: float,
                       pairs: tuple[tuple[Band, Band], ...] = BIDI_PAIRS) -> bool:
    def inside(w: float, band: Band) -> bool:
        return band[0] <= w <= band[1]

    return any((inside(w1, p) and inside(w2, q)) or (inside(w1, q) and inside(w2, p))
               for p, q in pairs)


# --- fibre and reach ----------------------------------------------------------------------

#: Multimode reach by fibre grade, metres (IEEE 802.3, from memory; OM5 as OM4 at 850 nm,
#: practice). 1000BASE-LX on multimode needs a mode-conditioning cord (cl.38).
MULTIMODE_REACH_M: dict[str, dict[str, float]] = {
    "1000BASE-SX": {"OM1": 275, "OM2": 550, "OM3": 550, "OM4": 550, "OM5": 550},  # T.38-6
    "1000BASE-LX": {"OM1": 550, "OM2": 550, "OM3": 550, "OM4": 550, "OM5": 550},  # T.38-6
    "10GBASE-SR": {"OM1": 33, "OM2": 82, "OM3": 300, "OM4": 400, "OM5": 400},  # T.52-6
    "10GBASE-LRM": {"OM1": 220, "OM2": 220, "OM3": 220, "OM4": 220, "OM5": 220},  # cl.68
    "25GBASE-SR": {"OM3": 70, "OM4": 100, "OM5": 100},  # cl.112
    "40GBASE-SR4": {"OM3": 100, "OM4": 150, "OM5": 150},  # cl.86
    "100GBASE-SR4": {"OM3": 70, "OM4": 100, "OM5": 100},  # cl.95
}

SM, MM, EITHER, LX = "single-mode", "multimode", "either", "lx"
_MULTIMODE_PMD = re.compile(r"BASE-(?:SR|SX|SW|FX)", re.IGNORECASE)
_SINGLEMODE_PMD = re.compile(r"BASE-(?:LR|ER|ZR|LW|EW|LX|BX|BR|DR|FR|PX|CWDM|PSM)|CWDM|PSM",
                             re.IGNORECASE)


def base_pmd(pmd: str) -> str:
    """The PMD name without a breakout count or BiDi side: "4x10GBASE-SR" -> "10GBASE-SR"."""
    return _BIDI_SIDE.sub("", _BREAKOUT.sub("", pmd.strip().upper()))


def fibre_kind(optic: OpticIdentity) -> str | None:
    """Which fibre the optic is made for: SM, MM, EITHER (LRM), LX (SM, or MM with a
    mode-conditioning cord), or None when nothing says."""
    return _of(optic).fibre


def _fibre_kind(pmd: str, nm: float | None) -> str | None:
    if "LRM" in pmd:
        return EITHER  # made for multimode; many parts also state single-mode (practice)
    if pmd == "1000BASE-LX":
        return LX
    if _MULTIMODE_PMD.search(pmd):
        return MM
    if _SINGLEMODE_PMD.search(pmd):
        return SM
    if nm is None:
        return None
    return MM if nm < SHORT_WAVE_MAX_NM else SM


def plant_fibre_kind(fibre: str) -> str | None:
    kind = fibre.strip().upper()
    return SM if kind in SINGLEMODE else MM if kind in MULTIMODE else None


# --- words ---------------------------------------------------------------------------------


def _nm(x: float) -> str:
    return f"{x:.0f} nm" if abs(x - round(x)) < 0.05 else f"{x:.1f} nm"


def _length(km: float) -> str:
    return f"{km * 1000:.0f} m" if km < 1.0 else f"{km:.1f} km"


def _end(o: OpticIdentity) -> str:
    return f"{o.device} {o.port}"


def _ends(span: PlantSpan) -> str:
    return f"{span.a_device} {span.a_port} / {span.b_device} {span.b_port}"


_CHECK_PARTS = ("Check the part numbers at both ends against the plant record and the "
                "optics' datasheets")


# --- checks ---------------------------------------------------------------------------------


def _band(spec: PmdSpec | None) -> Band | None:
    if spec is None or spec.wavelength_min_nm is None or spec.wavelength_max_nm is None:
        return None
    return spec.wavelength_min_nm, spec.wavelength_max_nm


def check_optic(optic: OpticIdentity, catalogue: Catalogue) -> list[Finding]:
    """Is the module's own wavelength inside the band of the PMD it advertises?

    BiDi parts are left to the pairing check: their band depends on which side they are.
    """
    nm = optic.wavelength_nm
    facts = _of(optic)
    if nm is None or not optic.pmd or facts.bidi:
        return []
    spec = catalogue.lookup(facts.base)
    band = _band(spec)
    if spec is None or band is None:
        return []
    lo, hi = band
    if lo - BAND_SLACK_NM <= nm <= hi + BAND_SLACK_NM:
        return []
    clause = f" (IEEE 802.3 cl.{spec.clause})" if spec.clause else ""
    return [Finding(
        Mismatch.OUT_OF_BAND, Severity.WARNING, optic.device, optic.port, "", "",
        f"{_end(optic)}: module transmits at {_nm(nm)} but advertises {spec.name}, whose band "
        f"is {_nm(lo)} to {_nm(hi)}{clause}",
        "The module's PMD code and its wavelength disagree (a coloured or longer-reach part "
        f"coded as a standard PMD): its readings are judged against {spec.name}'s edges, "
        "which may not apply. Check the part number against its datasheet; a site window "
        "for that part number pins the right edges.",
    )]


def _windows_differ_severity(wa: float, wb: float) -> Severity:
    # An 850 nm receiver (GaAs) does not see 1310/1550 nm light, and the fibre differs too;
    # long-wave receivers (InGaAs) usually see both 1310 and 1550 nm, so light may pass.
    short = (wa < SHORT_WAVE_MAX_NM, wb < SHORT_WAVE_MAX_NM)
    return Severity.CRITICAL if short[0] != short[1] else Severity.WARNING


def _finding(span: PlantSpan, kind: Mismatch, severity: Severity, text: str,
             advice: str) -> Finding:
    return Finding(kind, severity, span.a_device, span.a_port, span.b_device, span.b_port,
                   f"{_ends(span)}: {text}", advice)


def check_pair(span: PlantSpan, a: OpticIdentity, b: OpticIdentity) -> list[Finding]:
    """Do the optics at the two ends of one span belong together (PMD and wavelength)?"""
    out: list[Finding] = []
    fa, fb = _of(a), _of(b)
    bidi_a, bidi_b = fa.bidi, fb.bidi
    dual = fa.dual and fb.dual
    single_fibre = bidi_a and bidi_b and not dual
    wa, wb = a.wavelength_nm, b.wavelength_nm
    pmd_differs = bool(a.pmd and b.pmd) and fa.base != fb.base
    if pmd_differs:
        waves = f" at {_nm(wa)} and {_nm(wb)}" if wa is not None and wb is not None else ""
        if bidi_a != bidi_b and not (fa.dual or fb.dual):
            severity, why = Severity.CRITICAL, (
                "; one end is a single-fibre BiDi part, the other a duplex part, so they "
                "cannot link")
        elif wa is not None and wb is not None:
            severity, why = _windows_differ_severity(wa, wb), ""
        else:
            severity, why = Severity.WARNING, ""
        out.append(_finding(
            span, Mismatch.PMD, severity,
            f"PMD types differ ({a.pmd} vs {b.pmd}){waves}{why}",
            f"{_CHECK_PARTS}; fit the same PMD at both ends (both ends are judged against "
            "their own PMD's edges, and the span's budget assumes one).",
        ))
    if wa is None or wb is None:
        return out
    if single_fibre:
        out += _check_bidi(span, wa, wb)
    elif (bidi_a or bidi_b) and not dual:
        pass  # a BiDi part facing a duplex one: said above as a PMD mismatch
    else:
        out += _check_duplex(span, wa, wb, pmd_differs)
    return out


def _check_bidi(span: PlantSpan, wa: float, wb: float) -> list[Finding]:
    if abs(wa - wb) <= BIDI_SAME_NM:
        return [_finding(
            span, Mismatch.BIDI_SAME, Severity.CRITICAL,
            f"both BiDi ends transmit at {_nm(wa)}; a single fibre needs a complementary "
            "pair (e.g. 1310/1490 or 1270/1330 nm)",
            "Each end's receive filter passes only the other wavelength of its pair, so "
            "neither end sees the other. Replace one end with the matching other half of "
            "the pair.",
        )]
    if bidi_complementary(wa, wb):
        return []
    return [_finding(
        span, Mismatch.BIDI_NOT_COMPLEMENTARY, Severity.WARNING,
        f"BiDi ends transmit at {_nm(wa)} and {_nm(wb)}, not a pair we know "
        "(1310/1490, 1310/1550, 1490/1550, 1270/1330 nm)",
        "Check both parts' datasheets: each end's receive band must hold the other's "
        "transmit wavelength; fit the matching other half of one part's pair.",
    )]


def _check_duplex(span: PlantSpan, wa: float, wb: float, pmd_differs: bool) -> list[Finding]:
    lo, hi = DWDM_BAND_NM
    if lo <= wa <= hi and lo <= wb <= hi and abs(wa - wb) < CWDM_STEP_NM / 2:
        fa, fb = dwdm_frequency_thz(wa), dwdm_frequency_thz(wb)
        apart_ghz = abs(fa - fb) * 1000.0
        if apart_ghz < DWDM_SAME_GHZ:
            return []
        return [_finding(
            span, Mismatch.DWDM_CHANNEL, Severity.CRITICAL,
            f"DWDM channels differ: {_nm(wa)} (grid {dwdm_channel(wa):.2f} THz) vs "
            f"{_nm(wb)} (grid {dwdm_channel(wb):.2f} THz), {apart_ghz:.0f} GHz apart "
            "(ITU-T G.694.1)",
            "Through a mux/demux each port passes only its own channel, so this light is "
            f"blocked or leaks into a neighbour. {_CHECK_PARTS}, and the mux ports they use.",
        )]
    ca, cb = cwdm_channel(wa), cwdm_channel(wb)
    if ca is not None and cb is not None and ca != cb and not (
            ca in _PLAIN_WINDOWS and cb in _PLAIN_WINDOWS):
        return [_finding(
            span, Mismatch.CWDM_CHANNEL, Severity.CRITICAL,
            f"CWDM channels differ: {_nm(wa)} (channel {ca:.0f} nm) vs {_nm(wb)} (channel "
            f"{cb:.0f} nm), {abs(ca - cb):.0f} nm apart (ITU-T G.694.2)",
            "Through a mux/demux each port passes only its own channel, so this light is "
            f"blocked. {_CHECK_PARTS}, and the mux ports they use.",
        )]
    if abs(wa - wb) <= SAME_WINDOW_NM or pmd_differs:
        return []  # same window; or different windows already said by the PMD finding
    return [_finding(
        span, Mismatch.WAVELENGTH, _windows_differ_severity(wa, wb),
        f"wavelengths differ ({_nm(wa)} vs {_nm(wb)})",
        f"{_CHECK_PARTS}; both ends of a duplex span transmit in the same window.",
    )]


def check_plant(span: PlantSpan, ends: Iterable[OpticIdentity],
                catalogue: Catalogue) -> list[Finding]:
    """Is each end's optic made for the span's fibre, and does the span fit its reach?"""
    plant_kind = plant_fibre_kind(span.fibre)
    if plant_kind is None:
        return []
    out: list[Finding] = []
    wrong: list[str] = []
    no_cord: list[str] = []
    seen: set[str] = set()
    reach_text: list[str] = []
    for o in ends:
        kind = fibre_kind(o)
        if kind is None:
            continue
        if kind == LX and plant_kind == MM and not span.mode_conditioning:
            no_cord.append(_end(o))
            continue
        if kind in (SM, MM) and kind != plant_kind:
            wrong.append(f"{_end(o)} {o.pmd or _nm(o.wavelength_nm or 0.0)} is {kind}")
            continue
        pmd = _of(o).base
        if not pmd or pmd in seen:
            continue
        seen.add(pmd)
        reach = _reach_m(pmd, span, plant_kind, catalogue)
        if reach is not None and span.length_km * 1000.0 > reach[0]:
            reach_text.append(f"{pmd}'s {_length(reach[0] / 1000.0)} ({reach[1]})")
    if wrong:
        mm_optic_on_sm = plant_kind == SM
        out.append(_finding(
            span, Mismatch.FIBRE_TYPE,
            Severity.CRITICAL if mm_optic_on_sm else Severity.WARNING,
            f"{'; '.join(wrong)} but the plant records {span.fibre} {plant_kind} fibre",
            ("A multimode transmitter couples little light into a single-mode core"
             if mm_optic_on_sm else
             "A single-mode optic on multimode fibre is limited by modal dispersion and is "
             "not specified for it (1000BASE-LX with mode-conditioning cords and "
             "10GBASE-LRM are)")
            + ". Check the plant record and the fitted optics; fit optics made for "
            f"{span.fibre}, or correct the record.",
        ))
    if no_cord:
        out.append(_finding(
            span, Mismatch.FIBRE_TYPE, Severity.WARNING,
            f"1000BASE-LX at {', '.join(no_cord)} on {span.fibre} multimode fibre with no "
            "mode-conditioning patch cord recorded",
            "1000BASE-LX runs on multimode fibre only through a mode-conditioning patch cord "
            "at each end (IEEE 802.3 cl.38); fit them, or record them in the plant "
            "(mode_conditioning: true) if they are there.",
        ))
    if reach_text:
        out.append(_finding(
            span, Mismatch.BEYOND_REACH, Severity.WARNING,
            f"span is {_length(span.length_km)} of {span.fibre}, beyond "
            f"{', '.join(reach_text)}",
            "The standard does not promise this link: watch its receive margin and errors, "
            "or fit optics with a longer reach for this fibre.",
        ))
    return out


def _reach_m(pmd: str, span: PlantSpan, plant_kind: str,
             catalogue: Catalogue) -> tuple[float, str] | None:
    """The longest span the PMD is promised on this fibre, with where that comes from.

    The PMD table's row for the span's fibre first (its per-grade reach on multimode);
    past the standard's reach, a row's engineered-link length (10GBASE-ER: 30 km, 40 km
    engineered, IEEE 802.3 cl.52) still counts as promised, since the standard provides
    for it and the span-loss check watches the budget. ``MULTIMODE_REACH_M`` covers rows
    without per-grade figures.
    """
    spec = catalogue.lookup(pmd, fibre=span.fibre)
    reach = spec.reach_for(span.fibre) if spec is not None else None
    if plant_kind == MM and reach is None:
        reach = MULTIMODE_REACH_M.get(pmd, {}).get(span.fibre.strip().upper())
    if reach is None or not math.isfinite(reach):
        return None
    clause = f"IEEE 802.3 cl.{spec.clause}" if spec is not None and spec.clause else "IEEE 802.3"
    engineered = spec.reach_engineered_m if spec is not None else None
    if engineered is not None and engineered > reach:
        return engineered, f"engineered-link length, {clause}"
    where = f"reach on {span.fibre}" if plant_kind == MM else "reach"
    return reach, f"{where}, {clause}"


def check_spans(spans: Iterable[PlantSpan], identity: Callable[[str, str], OpticIdentity | None],
                catalogue: Catalogue) -> list[Finding]:
    """Pair and plant checks of some spans, each end's optic from ``identity``."""
    out: list[Finding] = []
    for span in spans:
        a = identity(span.a_device, span.a_port)
        b = identity(span.b_device, span.b_port)
        if a is not None and b is not None:
            out += check_pair(span, a, b)
        out += check_plant(span, [o for o in (a, b) if o is not None], catalogue)
    return out


def spans_by_device(plant: Plant) -> dict[str, list[PlantSpan]]:
    """Each device's spans (a span between two devices is listed under both), so one
    device's poll re-checks its own spans without walking the whole plant."""
    out: dict[str, list[PlantSpan]] = {}
    for span in plant.spans:
        out.setdefault(span.a_device, []).append(span)
        if span.b_device != span.a_device:
            out.setdefault(span.b_device, []).append(span)
    return out


def consistency(plant: Plant, optics: Mapping[PortRef, OpticIdentity], catalogue: Catalogue,
                *, devices: Collection[str] | None = None) -> list[Finding]:
    """Every finding over the plant and the optics seen, or only those involving
    ``devices``. A running monitor calls ``check_optic`` and ``check_spans`` per device
    with its own indexes instead (this walks everything)."""
    out: list[Finding] = []
    for (device, _port), optic in sorted(optics.items()):
        if devices is None or device in devices:
            out += check_optic(optic, catalogue)
    spans = [sp for sp in plant.spans if devices is None
             or sp.a_device in devices or sp.b_device in devices]
    return out + check_spans(spans, lambda d, p: optics.get((d, p)), catalogue)


# --- patching against the record (LLDP) -------------------------------------------------

_PATCH_ADVICE = (
    "Check the patching at both ends against the plant record and correct whichever is "
    "wrong, the record or the patch cords: until then span loss and far-end advice for "
    "these ports are worked out for the recorded pairing, not the real one."
)


def resolve_neighbour(lldp_far: tuple[str, str], devices: Collection[str]) -> PortRef | None:
    """The configured (device, port) an LLDP neighbour names: the system name as a device
    name, or its first label ("qm-dist-a.lab.example" is qm-dist-a); None when it is
    none of ours."""
    sys_name, port = lldp_far
    by_name = {d.casefold(): d for d in devices}
    name = sys_name.strip().casefold()
    device = by_name.get(name) or by_name.get(name.split(".", 1)[0])
    return (device, port) if device is not None else None


def check_patching(optics: Iterable[OpticIdentity], plant: Plant, devices: Collection[str],
                   ) -> list[Finding]:
    """A finding for each plant record an end's LLDP contradicts: the neighbour is one of
    our ports other than the record's far end (a patching error or a stale record). The
    finding names the record (its ends in a fixed order, so both ends' views are one
    finding); ports without a record or without a neighbour of ours give none."""
    out: list[Finding] = []
    for o in optics:
        if o.lldp_far is None:
            continue
        seen = resolve_neighbour(o.lldp_far, devices)
        record = plant.far_end(o.device, o.port)
        if seen is None or record is None:
            continue
        if (seen[0], seen[1].casefold()) == (record[0], record[1].casefold()):
            continue
        (a_dev, a_port), (b_dev, b_port) = sorted([(o.device, o.port), record])
        out.append(Finding(
            Mismatch.PATCHING, Severity.WARNING, a_dev, a_port, b_dev, b_port,
            f"{a_dev} {a_port} / {b_dev} {b_port}: the plant record pairs these, but LLDP "
            f"on {o.device} {o.port} sees {seen[0]} {seen[1]}: the patching differs from "
            "the record", _PATCH_ADVICE))
    return out


def discovered_links(optics: Iterable[OpticIdentity], plant: Plant,
                     devices: Collection[str]) -> dict[PortRef, PortRef]:
    """LLDP links of ports the plant has no record for, both ways: used as far ends."""
    out: dict[PortRef, PortRef] = {}
    for o in optics:
        if o.lldp_far is None or plant.far_end(o.device, o.port) is not None:
            continue
        seen = resolve_neighbour(o.lldp_far, devices)
        if seen is not None and plant.far_end(*seen) is None:
            out[(o.device, o.port)] = seen
            out[seen] = (o.device, o.port)
    return out
