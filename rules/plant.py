"""The fibre plant as recorded: which port faces which, what each span was built to lose,
and the wavelength its loss is judged at."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Protocol

from lightwarden.rules.catalogue import Catalogue
from lightwarden.rules.spanloss import PlantSpan

PortRef = tuple[str, str]  # (device, port)


@dataclass(slots=True)
class Plant:
    spans: list[PlantSpan]
    far: dict[PortRef, PortRef]  # both directions

    def far_end(self, device: str, port: str) -> PortRef | None:
        return self.far.get((device, port))


class SpanRecord(Protocol):
    """One fibre path as the site recorded it (the site config's ``plant`` entries)."""

    @property
    def a(self) -> str: ...  # "DEVICE PORT"
    @property
    def b(self) -> str: ...
    @property
    def km(self) -> float: ...
    @property
    def fibre(self) -> str: ...
    @property
    def connectors(self) -> int: ...
    @property
    def splices(self) -> int: ...
    @property
    def pad_a_db(self) -> float: ...  # fitted at A's receiver
    @property
    def pad_b_db(self) -> float: ...
    @property
    def wavelength_nm(self) -> float | None: ...
    @property
    def mode_conditioning(self) -> bool: ...


def build_plant(records: Iterable[SpanRecord], catalogue: Catalogue,
                pmd_of: dict[PortRef, str] | None = None) -> Plant:
    """Spans from the site's records; a span without a wavelength takes the middle of its
    optics' PMD band (from ``pmd_of``), else 1310 nm (850 nm on multimode), marked assumed."""
    spans: list[PlantSpan] = []
    far: dict[PortRef, PortRef] = {}
    for sp in records:
        a_dev, a_port = sp.a.split()
        b_dev, b_port = sp.b.split()
        wavelength, source = sp.wavelength_nm, "record"
        if wavelength is None:
            wavelength, source = _pmd_wavelength(
                catalogue, (pmd_of or {}).get((a_dev, a_port), "")), "pmd"
        if wavelength is None:
            # Never silently: the span carries that its wavelength was assumed, and the
            # report says so beside its budget.
            wavelength, source = (850.0 if sp.fibre.startswith("OM") else 1310.0), "assumed"
        spans.append(PlantSpan(a_dev, a_port, b_dev, b_port, sp.km, sp.fibre, wavelength,
                               sp.connectors, sp.splices, sp.pad_a_db, sp.pad_b_db,
                               sp.mode_conditioning, source))
        far[(a_dev, a_port)] = (b_dev, b_port)
        far[(b_dev, b_port)] = (a_dev, a_port)
    return Plant(spans, far)


def _pmd_wavelength(catalogue: Catalogue, pmd: str) -> float | None:
    spec = catalogue.get(pmd) if pmd else None
    if spec is None or spec.wavelength_min_nm is None or spec.wavelength_max_nm is None:
        return None
    return (spec.wavelength_min_nm + spec.wavelength_max_nm) / 2
