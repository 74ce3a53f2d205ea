"""Which model turns a cell's fill into a layer index and impedance: the rigorous table or the effective medium.

A plate whose generator declares a square or hexagonal lattice of round pillars or holes (parameters ``cell``,
``lattice``, ``period_mm``) gets its fills from a rigorous cell table (``cell_tables``), as long
as the lattice does not diffract inside the material; every other cell, and fills outside the
table's isolated-disc range, keep the zeroth-order effective medium, and the report says which.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from services.optics import lamellar
from services.optics.cell_tables import TERMS, CellTable, TableSpec, cell_table
from services.optics.effective_medium import DEFAULT_MODEL, effective_permittivity
from services.optics.materials import RFValues, wavelength_mm
from services.optics.rigorous import LATTICES, diffraction_limit
from services.part import Part


# Measured against rigorous tables (docs/rigorous-cells.md; eps 2.8, tan delta 0.03, heights 1-4 mm on a 1 mm base).
EFFECTIVE_MEDIUM_BOUND = ("effective medium against rigorous cells: square pillars within 7 deg and 0.01 in |t|^2 at "
                          "p n / lambda <= 0.5, 61 deg at 0.84; hexagonal pillars 18 deg at 0.5; holes 52-56 deg "
                          "already at 0.5. A fast preview for structured cells, exact for solid and empty ones.")
_LATTICE_WORDS = {"square": "square", "hex": "hexagonal"}


@dataclass(frozen=True, slots=True, eq=False)
class CellIndex:
    """Map fills (k,) to each frequency's layer index and impedance over eta0, both (nf, k)."""

    eps: np.ndarray                 # (nf,) complex, e^{+j omega t}
    model: str = DEFAULT_MODEL
    table: CellTable | None = None

    def __call__(self, fill) -> tuple[np.ndarray, np.ndarray]:
        fill = np.asarray(fill, dtype=float)
        n = np.sqrt(effective_permittivity(fill[None, :], self.eps[:, None], self.model) + 0j)
        z = 1 / n
        if self.table is not None:
            lo, hi = self.table.spec.fills[0], self.table.spec.fills[-1]
            use = (fill >= lo) & (fill <= hi) & (fill > 0) & (fill < 1)
            if use.any():
                n_t, z_t = self.table.equivalent(fill[use])
                n[:, use], z[:, use] = n_t, z_t
        return n, z

    def model_of(self, fill) -> np.ndarray:
        """Return which model maps each fill: "uniform" (empty or solid, exact), "rigorous_table" or "effective_medium"."""
        fill = np.asarray(fill, dtype=float)
        out = np.full(fill.shape, "effective_medium", dtype=object)
        if self.table is not None:
            lo, hi = self.table.spec.fills[0], self.table.spec.fills[-1]
            out[(fill >= lo) & (fill <= hi)] = "rigorous_table"
        out[(fill <= 0) | (fill >= 1)] = "uniform"
        return out

    def rows(self, index) -> "CellRows":
        """Return this model for a subset of its frequencies (one pass of the optics runs some of them)."""
        return CellRows(self, np.asarray(index))

    def to_dict(self) -> dict:
        if self.table is None:
            return {"model": "effective_medium", "effective_medium": self.model, "accuracy": EFFECTIVE_MEDIUM_BOUND}
        lo, hi = self.table.spec.fills[0], self.table.spec.fills[-1]
        return {"model": "rigorous_table", "fills_from_table": [round(lo, 4), round(hi, 4)],
                "outside_that_range": f"effective medium ({self.model})", "accuracy": EFFECTIVE_MEDIUM_BOUND,
                "table": self.table.to_dict()}


@dataclass(frozen=True, slots=True, eq=False)
class CellRows:
    """A cell model restricted to some of its frequencies: the same map, rows ``index`` of its output."""

    whole: CellIndex
    index: np.ndarray

    def __call__(self, fill) -> tuple[np.ndarray, np.ndarray]:
        n, z = self.whole(fill)
        return n[self.index], z[self.index]


def cell_index_for(part: Part, rf: RFValues, period: tuple[float, str] | None, *, folder: Path | None = None,
                   progress: Callable[[float], None] | None = None, terms: int = TERMS) -> tuple[CellIndex, str]:
    """Return the cell model for this part and a sentence saying why it was chosen."""
    if period is None or period[1] != "declared":
        return CellIndex(rf.eps), "effective medium: no declared lattice of round pillars or holes"
    return declared_cell_index(part.parameters or {}, rf, period[0], folder=folder, progress=progress, terms=terms)


def declared_cell_index(params: dict, rf: RFValues, period_mm: float, *, folder: Path | None = None,
                        progress: Callable[[float], None] | None = None, terms: int = TERMS
                        ) -> tuple[CellIndex, str]:
    """Return the cell model for a generator's declared cells (``params``: cell, lattice, height_mm,
    base_thickness_mm) and why.

    The generator that builds the plate and the check that judges it both come here, so they ask for
    the same table (the same cache key) and map fills to layers the same way.
    """
    eps = rf.eps
    if params.get("matching") == "grooves" and params.get("groove_field") in lamellar.POLARISATIONS:
        return _groove_index(params["groove_field"], rf, eps, float(period_mm))
    kind, lattice = params.get("cell"), params.get("lattice")
    if kind not in ("pillar", "hole"):
        return CellIndex(eps), "effective medium: no declared lattice of round pillars or holes"
    if lattice not in LATTICES:
        return CellIndex(eps), f"effective medium: rigorous tables cover square and hex lattices, this one is {lattice}"
    p, n_max = float(period_mm), float(np.sqrt(rf.eps_r.max()))
    pn_over_lambda = p * n_max / float(wavelength_mm(rf.freqs_ghz.max()))
    if pn_over_lambda >= diffraction_limit(lattice):
        return CellIndex(eps), ("effective medium: the lattice diffracts inside the material at the highest "
                                f"frequency (p n / lambda = {pn_over_lambda:.2f}, at least "
                                f"{diffraction_limit(lattice):.3g} on a {_LATTICE_WORDS[lattice]} lattice), "
                                "where no zeroth-order cell model holds")
    spec = TableSpec(freqs_ghz=tuple(float(f) for f in rf.freqs_ghz), eps=tuple(complex(e) for e in eps),
                     period_mm=p, kind=kind, base_mm=float(params.get("base_thickness_mm") or 0.0),
                     heights_mm=(float(params.get("height_mm") or 1.0),), lattice=lattice, terms=terms)
    return CellIndex(eps, table=cell_table(spec, folder=folder, progress=progress)), (
        f"rigorous cell table: the generator declared a {_LATTICE_WORDS[lattice]} lattice of round "
        f"{kind}s, period {p:g} mm (p n / lambda = {pn_over_lambda:.2f})")


def _groove_index(field: str, rf: RFValues, eps: np.ndarray, period_mm: float) -> tuple[CellIndex, str]:
    """Return the model of a window's declared grooves: the lamellar solver's equivalent layers, and why."""
    pn_over_lambda = period_mm * float(np.sqrt(rf.eps_r.max())) / float(wavelength_mm(rf.freqs_ghz.max()))
    spec = lamellar.GrooveSpec(freqs_ghz=tuple(float(f) for f in rf.freqs_ghz), eps=tuple(complex(e) for e in eps),
                              period_mm=period_mm, polarisation=field)
    return CellIndex(eps, table=lamellar.groove_table(spec)), (
        f"lamellar grating: the generator declared grooves of period {period_mm:g} mm with the electric field "
        f"{field} them (p n / lambda = {pn_over_lambda:.2f})")
