"""The numbers a lab manager edits, with their labels: one table for the forms, the checks and the pages.

A path names a value inside a profile's or material's data ("rules.min_gap.xy_mm"). Values not
listed here (new rule limits, sources) stay editable in the advanced JSON box.
"""

from __future__ import annotations

from dataclasses import dataclass

from services.estimate.time_models import MODELS


@dataclass(frozen=True, slots=True)
class Number:
    """One editable value: its key, its label, and the kind of number it must be.

    Kinds: ``limit`` a rule limit, positive or blank (blank: the rule says it was not checked);
    ``positive`` above 0 (a model divides by it); ``nonneg`` and ``money`` 0 or more; ``count`` a
    whole number, 0 or more; ``fraction`` from 0 to 1; ``probability`` from 0 to below 1;
    ``angle`` from 0 to 90 degrees; ``severity`` blocker, caution or note.
    """

    key: str
    label: str
    kind: str = "limit"

    @property
    def integer(self) -> bool:
        return self.kind == "count"


# Rule name -> (title, limits). The keys are those the rule modules read (services/rules).
RULES: dict[str, tuple[str, tuple[Number, ...]]] = {
    "min_feature": ("Minimum feature", (
        Number("supported_mm", "Supported feature, mm"), Number("unsupported_mm", "Free-standing feature, mm"),
        Number("severity", "Severity", "severity"))),
    "min_gap": ("Minimum gap", (
        Number("xy_mm", "Gap in XY, mm"), Number("z_mm", "Gap along Z, mm"), Number("severity", "Severity", "severity"))),
    "min_hole": ("Minimum hole", (
        Number("along_z_mm", "Hole with its axis along Z, mm"), Number("across_z_mm", "Hole with its axis across Z, mm"),
        Number("severity", "Severity", "severity"))),
    "aspect_ratio": ("Pin aspect ratio (height / diameter)", (
        Number("caution", "Caution above"), Number("blocker", "Blocker above"))),
    "overhang": ("Overhang", (
        Number("self_supporting_deg", "Self-supporting from horizontal, degrees", "angle"),
        Number("severity", "Severity", "severity"))),
    "island": ("Islands", (Number("severity", "Severity", "severity"),)),
    "trapped_volume": ("Trapped volume", (
        Number("severity", "Severity of an enclosed void", "severity"), Number("cup_severity", "Severity of a cup", "severity"),
        Number("drain_hole_mm", "Drain hole diameter, mm"))),
    "build_fit": ("Build-volume fit", (Number("spacing_mm", "Spacing between parts, mm"),)),
}

# Limits that are lengths in the XY plane or along Z: none can be finer than the grid the part is printed on.
XY_LIMITS = {"min_feature.supported_mm": "smallest supported feature", "min_feature.unsupported_mm":
             "smallest free-standing feature", "min_gap.xy_mm": "minimum gap in XY",
             "min_hole.along_z_mm": "smallest hole along Z", "min_hole.across_z_mm": "smallest hole across Z"}
Z_LIMITS = {"min_gap.z_mm": "minimum gap along Z"}

# Time model (services.estimate.time_models.MODELS) -> (title, constants, the ones it cannot do without).
TIME_MODELS: dict[str, tuple[str, tuple[Number, ...], tuple[str, ...]]] = {
    "masked_vat": ("Masked vat (LCD or projector)", (
        Number("setup_s", "Setup, s", "nonneg"), Number("bottom_layers", "Bottom layers", "count"),
        Number("bottom_exposure_s", "Bottom exposure, s", "nonneg"),
        Number("transition_layers", "Transition layers", "count"), Number("exposure_s", "Exposure, s", "nonneg"),
        Number("lift_mm", "Lift height, mm", "nonneg"),
        Number("bottom_lift_speed_mm_s", "Bottom lift speed, mm/s", "positive"),
        Number("lift_speed_mm_s", "Lift speed, mm/s", "positive"),
        Number("retract_speed_mm_s", "Retract speed, mm/s", "positive"), Number("wait_s", "Wait per layer, s", "nonneg"),
        Number("support_density", "Support density (share of the column)", "fraction")),
        ("setup_s", "bottom_layers", "bottom_exposure_s", "exposure_s", "lift_mm", "lift_speed_mm_s",
         "retract_speed_mm_s", "wait_s")),
    "laser_vat": ("Laser-scanned vat", (
        Number("setup_s", "Setup, s", "nonneg"), Number("hatch_spacing_mm", "Hatch spacing, mm", "positive"),
        Number("scan_speed_mm_s", "Scan speed, mm/s", "positive"), Number("scans_per_layer", "Scans per layer", "count"),
        Number("contour_speed_mm_s", "Contour speed, mm/s", "positive"),
        Number("jump_s_per_part", "Jumps per part and layer, s", "nonneg"),
        Number("recoat_s", "Recoat per layer, s", "nonneg"),
        Number("support_density", "Support density (share of the column)", "fraction")),
        ("setup_s", "hatch_spacing_mm", "scan_speed_mm_s", "contour_speed_mm_s", "recoat_s")),
    "extrusion": ("Filament extrusion", (
        Number("heat_up_s", "Heat-up, s", "nonneg"), Number("volumetric_rate_mm3_s", "Volumetric rate, mm³/s", "positive"),
        Number("infill_fraction", "Infill fraction", "fraction"),
        Number("shell_thickness_mm", "Shell thickness, mm", "nonneg"),
        Number("layer_change_s", "Layer change, s", "nonneg"),
        Number("travel_s_per_part_layer", "Travel per part and layer, s", "nonneg"),
        Number("support_density", "Support density (share of the column)", "fraction")),
        ("heat_up_s", "volumetric_rate_mm3_s", "layer_change_s")),
}

COST: tuple[Number, ...] = (
    Number("machine_rate_per_h", "Machine rate per hour", "money"),
    Number("labour_rate_per_h", "Labour rate per hour", "money"),
    Number("setup_labour_h", "Setup labour per build, hours", "nonneg"),
    Number("post_process_per_build", "Post-processing per build", "money"),
    Number("post_process_per_part", "Post-processing per part", "money"),
    Number("consumables_per_build", "Consumables per build", "money"),
    Number("margin", "Margin (0.15 = 15 %)", "money"),
    Number("p_fail", "Failure probability (0.1 = 10 %)", "probability"),
    Number("spacing_mm", "Spacing between parts on the plate, mm"),
)

MATERIAL: tuple[Number, ...] = (
    Number("density_g_cm3", "Density, g/cm³", "positive"), Number("price", "Price", "money"),
    Number("waste_factor", "Waste factor (0.1 = 10 % lost)", "probability"),
)

BASICS = {"pixel_mm": "pixel", "layer_height_mm": "layer height", "layer_heights_mm": "offered layer heights",
          "build_volume_mm": "build volume", "xy_accuracy_mm": "XY accuracy", "z_accuracy_mm": "Z accuracy",
          "cost.currency": "Currency", "currency": "Currency", "price_unit": "Priced per", "name": "Name",
          "notes": "Notes", "process": "Process", "technology": "Technology", "kind": "Kind", "processes": "Printed by",
          "rf": "RF data (permittivity and loss tangent)", "band_ghz": "Design band, GHz"}


def _labels() -> dict[str, str]:
    labels = {f"rules.{rule}.{n.key}": f"{title} – {n.label}"
              for rule, (title, numbers) in RULES.items() for n in numbers}
    for _, numbers, _ in TIME_MODELS.values():
        labels.update({f"time_model.{n.key}": n.label for n in numbers})
    labels.update({f"cost.{n.key}": n.label for n in COST})
    labels.update({n.key: n.label for n in MATERIAL})
    return {**labels, **BASICS}


LABELS = _labels()


def time_model_for(technology: str) -> str | None:
    """Return the time model a technology is estimated with, or None when there is none yet."""
    return MODELS.get(technology)


def label_of(path: str) -> str:
    """Return the label of a value by its path, for sentences about it."""
    return LABELS.get(path, path)
