"""What every builder shares: the build context, the Component result and its assembly."""

from __future__ import annotations

from dataclasses import dataclass

import manifold3d as m3d
import numpy as np

from services.components.formulas import Medium
from services.components.solid import to_part
from services.part import Part
from services.profiles import Material, PrinterProfile


@dataclass(frozen=True, slots=True, eq=False)
class CellLayout:
    """The cells of a graded-index plate, one row per cell.

    x_mm, y_mm : (k,) cell centres; diameter_mm : (k,) pillar or hole diameter (0: no pillar, or
    no hole); fill : (k,) material fraction of the cell; target_rad / achieved_rad : (k,) phase
    delay wanted and given by the cell model, wrapped to [0, 2 pi); clipped : (k,) True where the
    printer's limits moved the cell away from its ideal size; designed_by : (k,) the model that gave
    the cell's delay ("rigorous_table", "effective_medium", or "uniform" for no pillar or no hole).
    """

    x_mm: np.ndarray
    y_mm: np.ndarray
    diameter_mm: np.ndarray
    fill: np.ndarray
    target_rad: np.ndarray
    achieved_rad: np.ndarray
    clipped: np.ndarray
    designed_by: np.ndarray

    @property
    def phase_error_rad(self) -> np.ndarray:
        """Return achieved minus target, wrapped to (-pi, pi]."""
        return wrap_pi(self.achieved_rad - self.target_rad)


@dataclass(frozen=True, slots=True, eq=False)
class Component:
    """A generated part with the numbers that describe it.

    ``part.parameters`` holds every resolved input and derived value; ``derived`` holds the derived
    values alone, for the report; ``focal_length_mm`` is measured from the part's top (+z) face.
    """

    kind: str
    part: Part
    derived: dict
    focal_length_mm: float | None
    cells: CellLayout | None = None

    def to_dict(self) -> dict:
        return {"kind": self.kind, "parameters": self.part.parameters, "derived": self.derived,
                "focal_length_mm": self.focal_length_mm}


@dataclass(frozen=True, slots=True)
class Context:
    """The inputs of one build: kind, resolved parameters, material and (optional) printer."""

    kind: str
    params: dict
    material: Material
    printer: PrinterProfile | None

    @property
    def volumes(self) -> list[tuple[float, float, float]] | None:
        """Return the build volumes to fit: the caller's list, else the printer's, else none."""
        if self.params.get("build_volumes_mm"):
            return self.params["build_volumes_mm"]
        return [tuple(self.printer.build_volume_mm)] if self.printer is not None else None


def smallest_printable_mm(printer: PrinterProfile | None) -> float:
    """Return the narrowest wall or gap a generator may make on this printer: the larger of its minimum
    (supported) feature and its minimum XY gap, plus one pixel for the rasterising (0 without a printer)."""
    if printer is None:
        return 0.0
    feature = (printer.rule("min_feature") or {}).get("supported_mm") or 0.0
    gap = (printer.rule("min_gap") or {}).get("xy_mm") or 0.0
    return max(feature, gap) + printer.pixel_mm


def wrap_pi(phase_rad):
    """Return the phase wrapped to (-pi, pi]."""
    return -((np.pi - np.asarray(phase_rad)) % (2 * np.pi) - np.pi)


def finish(ctx: Context, solid: m3d.Manifold, medium: Medium, derived: dict, *,
           focal_length_mm: float | None, cells: CellLayout | None = None) -> Component:
    """Return the Component: the solid as a Part carrying every parameter and derived value."""
    derived = plain(derived)
    inputs = {k: v for k, v in ctx.params.items() if k != "build_volumes_mm"}
    parameters = {"kind": ctx.kind, "material": ctx.material.slug,
                  "printer": ctx.printer.slug if ctx.printer is not None else None,
                  **inputs, **plain(medium.to_dict()), **derived}
    name = f"{ctx.kind}-{ctx.params['diameter_mm']:g}mm-{medium.freq_ghz:g}GHz"
    part = to_part(solid, name=name, parameters=parameters)
    return Component(ctx.kind, part, derived, focal_length_mm, cells)


def plain(value):
    """Return the value with numpy scalars and arrays turned into Python floats, ints and lists."""
    if isinstance(value, dict):
        return {k: plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [plain(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        return float(value)
    return value
