"""Print time per process, from one part's per-layer loads and the number of parts on the plate.

Sources (manufacturing.md §3): masked vat, the bottom-layer/exposure/lift-cycle sum of §3.1;
laser-scanned vat, the per-layer scan + contour + jump + recoat form of Gibson, Rosen & Stucker,
2nd ed., §16.6.2; material extrusion, the quote-time volumetric form of §3.3.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from services.errors import UnusableInput
from services.profiles import PrinterProfile

MODELS = {"lcd_masked": "masked_vat", "projector_masked": "masked_vat",
          "laser_scanned": "laser_vat", "filament": "extrusion"}

_NEEDS = {
    "masked_vat": ("setup_s", "bottom_layers", "bottom_exposure_s", "exposure_s", "lift_mm",
                   "lift_speed_mm_s", "retract_speed_mm_s", "wait_s"),
    "laser_vat": ("setup_s", "hatch_spacing_mm", "scan_speed_mm_s", "contour_speed_mm_s", "recoat_s"),
    "extrusion": ("heat_up_s", "volumetric_rate_mm3_s", "layer_change_s"),
}

# A 4-neighbour pixel boundary overstates a curve's length by 4/pi on average over orientations
# (Cauchy-Crofton); optics parts are mostly round, so contour lengths are scaled back by pi/4.
CONTOUR_PER_PIXEL_EDGE = math.pi / 4


@dataclass(frozen=True, slots=True, eq=False)
class LayerLoads:
    """What one part asks of each layer, the inputs every time model reads.

    area_mm2, perimeter_mm : (count,) float64, the part's solid area and pixel-boundary length
    support_area_mm2 : (count,) float64, support cross-section after the support density factor
    """

    layer_height_mm: float
    area_mm2: np.ndarray
    perimeter_mm: np.ndarray
    support_area_mm2: np.ndarray

    @property
    def count(self) -> int:
        return int(len(self.area_mm2))

    @property
    def part_volume_mm3(self) -> float:
        return float(self.area_mm2.sum() * self.layer_height_mm)

    @property
    def support_volume_mm3(self) -> float:
        return float(self.support_area_mm2.sum() * self.layer_height_mm)

    @property
    def occupied_layers(self) -> int:
        """Return the number of layers with anything to build (part or support)."""
        return int(np.count_nonzero((self.area_mm2 + self.support_area_mm2) > 0))


def model_of(printer: PrinterProfile) -> str:
    """Return the name of the time model for the printer's technology, refusing what has none."""
    model = MODELS.get(printer.technology)
    if model is None:
        raise UnusableInput("no_time_model",
                            f"Printer profile {printer.slug!r}: there is no print-time "
                            f"model for {printer.technology!r} yet; choose another printer.")
    missing = [k for k in _NEEDS[model] if not isinstance(printer.time_model.get(k), (int, float))]
    if missing:
        raise UnusableInput("bad_profile",
                            f"Printer profile {printer.slug!r} lacks the time-model "
                            f"constants {', '.join(missing)}; the lab manager sets them.")
    return model


def build_time_s(printer: PrinterProfile, loads: LayerLoads, parts: int) -> float:
    """Return the uncalibrated time of one build holding ``parts`` copies of the part."""
    model = model_of(printer)
    tm = printer.time_model
    if model == "masked_vat":
        return masked_vat_time_s(tm, loads.count)
    if model == "laser_vat":
        return laser_vat_time_s(tm, loads, parts)
    return extrusion_time_s(tm, loads, parts)


def masked_vat_time_s(tm: dict, layers: int) -> float:
    """Return a masked-vat build time: it depends on the layer count only, never on area or parts."""
    # T = T_setup + N_b (t_exp,b + t_cyc,b) + N_t (t_exp,t + t_cyc) + (N - N_b - N_t)(t_exp + t_cyc),
    # t_cyc = h_lift / v_up + h_lift / v_down + t_wait (manufacturing.md §3.1)
    bottom = min(int(tm["bottom_layers"]), layers)
    transition = min(int(tm.get("transition_layers", 0)), layers - bottom)
    normal = layers - bottom - transition
    lift = float(tm["lift_mm"])
    down_s = lift / tm["retract_speed_mm_s"] + tm["wait_s"]
    cycle_s = lift / tm["lift_speed_mm_s"] + down_s
    bottom_cycle_s = lift / tm.get("bottom_lift_speed_mm_s", tm["lift_speed_mm_s"]) + down_s
    # Transition layers ramp the exposure linearly from bottom to normal, so they average the two.
    transition_exposure_s = (tm["bottom_exposure_s"] + tm["exposure_s"]) / 2
    return float(tm["setup_s"] + bottom * (tm["bottom_exposure_s"] + bottom_cycle_s)
                 + transition * (transition_exposure_s + cycle_s) + normal * (tm["exposure_s"] + cycle_s))


def laser_vat_time_s(tm: dict, loads: LayerLoads, parts: int) -> float:
    """Return a laser-vat build time: scan time grows with the whole plate's area, so with ``parts``."""
    # t_layer,k = n_st (A_k / h_s) / v_s + P_k / v_c + t_jump,k + t_recoat (Gibson, Rosen & Stucker,
    # 2nd ed., §16.6.2, per-layer form in manufacturing.md §3.2); supports are scanned like the part.
    hatch_mm = tm.get("scans_per_layer", 1) * (loads.area_mm2 + loads.support_area_mm2) / tm["hatch_spacing_mm"]
    contour_mm = loads.perimeter_mm * CONTOUR_PER_PIXEL_EDGE
    per_part_s = (hatch_mm.sum() / tm["scan_speed_mm_s"] + contour_mm.sum() / tm["contour_speed_mm_s"]
                  + loads.occupied_layers * tm.get("jump_s_per_part", 0.0))
    return float(tm["setup_s"] + parts * per_part_s + loads.count * tm["recoat_s"])


def extrusion_time_s(tm: dict, loads: LayerLoads, parts: int) -> float:
    """Return a filament build time: extruded volume over the volumetric rate, plus layers and heat-up."""
    # T = V_ext / Q_eff + N t_layer_change + T_heat + T_travel, with
    # V_ext = V_shell + phi (V - V_shell) + f_sup V_sup (manufacturing.md §3.3)
    volume = loads.part_volume_mm3
    shell = min(volume, float(loads.perimeter_mm.sum()) * CONTOUR_PER_PIXEL_EDGE * loads.layer_height_mm
                * tm.get("shell_thickness_mm", 0.0))
    extruded = shell + tm.get("infill_fraction", 1.0) * (volume - shell) + loads.support_volume_mm3
    per_part_s = extruded / tm["volumetric_rate_mm3_s"] + loads.occupied_layers * tm.get("travel_s_per_part_layer", 0.0)
    return float(tm["heat_up_s"] + loads.count * tm["layer_change_s"] + parts * per_part_s)


def format_duration(seconds: float) -> str:
    """Return a duration a person reads at a glance: '45 s', '12 min', '3 h 05 min', '2 d 4 h'."""
    if not math.isfinite(seconds):
        return "no valid time"
    if seconds < 59.5:
        return f"{round(seconds)} s"
    minutes = round(seconds / 60)
    if minutes < 60:
        return f"{minutes} min"
    hours, minutes = divmod(minutes, 60)
    if hours < 24:
        return f"{hours} h {minutes:02d} min"
    days, hours = divmod(round(seconds / 3600), 24)
    return f"{days} d {hours} h"
