"""The estimate: print time, material and supports, plate packing and the quote, for one part.

Everything is read off the as-printed layer stack, so the estimate matches what the rules checked.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from services.errors import UnusableInput
from services.estimate.calibration import MIN_LOGS, Calibration, fit_calibration
from services.estimate.material import MaterialUse, material_use, support_columns_mm2
from services.estimate.packing import Placement, pack_rectangles
from services.estimate.quote import Cost, CostLine, QuantityRow, job_cost, quantity_table, rates_of
from services.estimate.time_models import LayerLoads, build_time_s, format_duration, model_of
from services.layers import LayerStack
from services.part import Part
from services.profiles import Material, PrinterProfile, check_pairing

__all__ = ["Calibration", "Cost", "CostLine", "Estimate", "LayerLoads", "MaterialUse", "Placement",
           "QuantityRow", "estimate_print", "fit_calibration", "layer_loads", "pack_rectangles"]

# The as-printed volume differs from the mesh's by the pixel and layer rounding of the surface;
# beyond this share something thin was lost or gained (engineering judgement [R]).
VOLUME_CHECK_TOLERANCE = 0.05


@dataclass(frozen=True, slots=True)
class Estimate:
    """Time, material, cost and quantity table for one part; ``cost`` is for a single part."""

    part_volume_ml: float
    mesh_volume_ml: float | None
    support_volume_ml: float
    support_source: str
    material_ml: float
    material_g: float
    material_cost: float
    print_time_s: float
    print_time_text: str
    calibrated: bool
    calibration: Calibration | None
    time_model: str
    layers: int
    height_mm: float
    footprint_mm: tuple[float, float]
    parts_per_build: int
    cost: Cost
    quantities: tuple[QuantityRow, ...]
    layout: tuple[Placement, ...] = ()
    notes: tuple[str, ...] = ()
    waste_fraction: float = 0.0  # the material's waste factor, included in material_ml

    def to_dict(self) -> dict:
        return {
            "part_volume_ml": round(self.part_volume_ml, 4),
            "mesh_volume_ml": None if self.mesh_volume_ml is None else round(self.mesh_volume_ml, 4),
            "support_volume_ml": round(self.support_volume_ml, 4), "support_source": self.support_source,
            "material_ml": round(self.material_ml, 4), "material_g": round(self.material_g, 4),
            "waste_ml": round(self.material_ml - self.part_volume_ml - self.support_volume_ml, 4),
            "waste_percent": round(100.0 * self.waste_fraction, 2),
            "material_cost": round(self.material_cost, 2),
            "print_time_s": round(self.print_time_s, 1), "print_time_text": self.print_time_text,
            "calibrated": self.calibrated,
            "calibration": self.calibration.to_dict() if self.calibration is not None else None,
            "time_model": self.time_model, "layers": self.layers, "height_mm": round(self.height_mm, 4),
            "footprint_mm": [round(v, 3) for v in self.footprint_mm], "parts_per_build": self.parts_per_build,
            "cost": self.cost.to_dict(), "quantities": [row.to_dict() for row in self.quantities],
            "layout_mm": [p.to_list() for p in self.layout], "notes": list(self.notes),
        }


def estimate_print(*, stack: LayerStack, part: Part, printer: PrinterProfile, material: Material,
                   quantities: tuple[int, ...] = (1, 5, 10, 25), support_volume_mm3: float | None = None,
                   calibration: Calibration | None = None) -> Estimate:
    """Return the print time, material, single-part cost and quantity table for the part.

    ``support_volume_mm3`` is the volume under overhangs that needs support (before the support
    density factor), when the overhang rule measured it; otherwise the stack is projected.
    """
    check_pairing(printer, material)
    model = model_of(printer)
    rates = rates_of(printer, material)
    loads, support_source = layer_loads(stack, printer, support_volume_mm3, name=part.name)
    calibrated = calibration is not None and calibration.applies
    factor = calibration.factor if calibrated else 1.0

    def timer(parts: int) -> float:
        return factor * build_time_s(printer, loads, parts)

    use = material_use(part_mm3=loads.part_volume_mm3, support_mm3=loads.support_volume_mm3, material=material)
    footprint = _footprint_mm(stack)
    layout = _layout(stack, printer, rates, footprint)
    note = f"{use.material_ml:.2f} ml at {material.price:g} {material.currency}/{material.price_unit}"
    money = dict(rates=rates, material_per_part=use.cost, build_time_s=timer, material_note=note)
    cost, time_s = job_cost(quantity=1, per_build=1, **money)
    rows = quantity_table(quantities=tuple(int(q) for q in quantities), per_build=len(layout), **money)
    return Estimate(
        part_volume_ml=use.part_ml, mesh_volume_ml=_mesh_volume_ml(part), support_volume_ml=use.support_ml,
        support_source=support_source, material_ml=use.material_ml, material_g=use.material_g,
        material_cost=use.cost, print_time_s=time_s, print_time_text=format_duration(time_s),
        calibrated=calibrated, calibration=calibration, time_model=model, layers=stack.count,
        height_mm=stack.count * stack.layer_height_mm, footprint_mm=footprint, parts_per_build=len(layout),
        cost=cost, quantities=rows, layout=layout, waste_fraction=material.waste_factor,
        notes=_notes(loads, part, printer, layout, calibration, support_source),
    )


def layer_loads(stack: LayerStack, printer: PrinterProfile, support_volume_mm3: float | None = None,
                *, name: str = "The part") -> tuple[LayerLoads, str]:
    """Return one part's per-layer loads, supports scaled by the profile's density, and their origin."""
    if stack.count == 0 or not np.any(stack.area_mm2 > 0):
        raise UnusableInput("empty_part",
                            f"{name}: the part has no solid at this printer's {stack.pixel_mm:g} mm pixel "
                            f"and {stack.layer_height_mm:g} mm layers; check the units and the part's size.")
    if support_volume_mm3 is not None and float(support_volume_mm3) == 0.0:
        # The rules found nothing to support: the projection would only be scaled to zero (0.6 s of the 2M lens's
        # estimate, which every check waits for after its rules).
        return LayerLoads(stack.layer_height_mm, stack.area_mm2, stack.perimeter_mm, np.zeros(stack.count)), "rules"
    columns = support_columns_mm2(stack)
    source = "projection"
    if support_volume_mm3 is not None:
        columns = _rescaled(columns, float(support_volume_mm3), stack.layer_height_mm)
        source = "rules"
    density = float(printer.time_model.get("support_density", 0.0))
    return LayerLoads(stack.layer_height_mm, stack.area_mm2, stack.perimeter_mm, columns * density), source


def _rescaled(columns: np.ndarray, volume_mm3: float, layer_height_mm: float) -> np.ndarray:
    """Return per-layer support areas that add up to the given volume, shaped like the projection."""
    if not (volume_mm3 >= 0 and math.isfinite(volume_mm3)):
        raise UnusableInput("bad_support_volume",
                            "The support volume must be a finite number "
                            "of cubic millimetres, zero or more.")
    projected = columns.sum() * layer_height_mm
    if projected > 0:
        return columns * (volume_mm3 / projected)
    return np.full(len(columns), volume_mm3 / (len(columns) * layer_height_mm))


def _footprint_mm(stack: LayerStack) -> tuple[float, float]:
    """Return the x and y extent of the stack's solid columns (supports stand inside them)."""
    cols = np.flatnonzero(stack.footprint.any(axis=0))
    rows = np.flatnonzero(stack.footprint.any(axis=1))
    return float((cols[-1] - cols[0] + 1) * stack.pixel_mm), float((rows[-1] - rows[0] + 1) * stack.pixel_mm)


def _layout(stack: LayerStack, printer: PrinterProfile, rates: dict,
            footprint: tuple[float, float]) -> tuple[Placement, ...]:
    """Return the placements of a full build, none when the part is taller than the build volume."""
    if stack.count * stack.layer_height_mm > printer.build_volume_mm[2] + 1e-9:
        return ()
    spacing = rates.get("spacing_mm", (printer.rules.get("build_fit") or {}).get("spacing_mm", 0.0))
    return pack_rectangles(width_mm=footprint[0], depth_mm=footprint[1],
                           plate_mm=printer.build_volume_mm[:2], spacing_mm=float(spacing))


def _mesh_volume_ml(part: Part) -> float | None:
    volume = float(part.volume_mm3)
    return volume / 1000.0 if math.isfinite(volume) and volume > 0 else None


def _notes(loads: LayerLoads, part: Part, printer: PrinterProfile, layout: tuple,
           calibration: Calibration | None, support_source: str) -> tuple[str, ...]:
    notes = []
    mesh_ml = _mesh_volume_ml(part)
    printed_ml = loads.part_volume_mm3 / 1000.0
    if mesh_ml is not None and abs(printed_ml - mesh_ml) > VOLUME_CHECK_TOLERANCE * mesh_ml:
        notes.append(f"The as-printed volume ({printed_ml:.3f} ml) differs from the mesh volume ({mesh_ml:.3f} ml) "
                     f"by {abs(printed_ml / mesh_ml - 1):.0%}: thin features are lost or gained at "
                     f"{printer.name}'s pixel and layer.")
    if not layout:
        notes.append(f"The part does not fit {printer.name}'s build volume: the cost is for one part "
                     "as if it did, and there is no quantity table.")
    if support_source == "projection" and loads.support_volume_mm3 > 0:
        notes.append("Supports are estimated by projecting every overhang straight down to the part or the plate.")
    if calibration is not None and 0 < calibration.count < MIN_LOGS:
        notes.append(f"Print time is uncalibrated: {printer.name}'s correction rests on {calibration.count} accepted "
                     f"print{'s' if calibration.count > 1 else ''} so far and applies from {MIN_LOGS}.")
    elif calibration is None or not calibration.applies:
        notes.append(f"Print time is uncalibrated: log real print times on {printer.name} to calibrate it.")
    elif calibration.outliers:
        notes.append(f"The print-time correction leaves out {len(calibration.outliers)} logged print"
                     f"{'s' if len(calibration.outliers) > 1 else ''} far from the others (see the printer's page).")
    return tuple(notes)
