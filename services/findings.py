"""Findings (one problem or remark about a part) and the verdict they add up to."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

SEVERITIES = ("blocker", "caution", "note")

RULES = (
    "mesh_health", "units", "build_fit", "min_feature", "min_gap", "min_hole", "aspect_ratio",
    "overhang", "island", "trapped_volume", "period", "phase_error", "focus", "rf_table", "not_computed",
    "cell_model", "requirement",
)

# Rule families that speak of the designer's targets, not of printability: kept out of the verdict.
NOT_PRINTABILITY = ("requirement",)


@dataclass(frozen=True, slots=True)
class Finding:
    """One problem or remark, with where it is and how bad.

    ``picture`` names a figure in ``Report.figures`` (PNG bytes), or is None.
    """

    rule: str
    severity: str
    message: str
    measured: float | None = None
    limit: float | None = None
    unit: str | None = None
    location_mm: tuple[float, float, float] | None = None
    layers: tuple[int, int] | None = None
    count: int = 1
    picture: str | None = None
    # Each instance of a grouped finding, worst first, at most INSTANCES_SHOWN of ``count``:
    # {"location_mm": [x, y, z], "layers": [first, last], "measured": value in ``unit``}.
    instances: tuple = ()

    def __post_init__(self) -> None:
        if self.severity not in SEVERITIES:
            raise ValueError(f"unknown severity {self.severity!r}")
        if self.rule not in RULES:
            raise ValueError(f"unknown rule {self.rule!r}")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["location_mm"] = list(self.location_mm) if self.location_mm is not None else None
        d["layers"] = list(self.layers) if self.layers is not None else None
        d["instances"] = [dict(i) for i in self.instances]
        return d


INSTANCES_SHOWN = 200  # a pillar field's 2,000 identical problems: the worst 200 are listed, the count says all


def instance_rows(frame, *, measured, flats, layers, firsts, lasts, worst: str = "min") -> tuple[dict, ...]:
    """Return a grouped finding's instances, worst first, at most INSTANCES_SHOWN.

    ``frame`` locates a pixel (``location(flat, layer)``); the arrays hold one entry per instance: its
    measured value (in the finding's unit), the pixel and layer where it is worst, and its layer range.
    """
    measured = np.asarray(measured, dtype=float)
    order = np.argsort(measured if worst == "min" else -measured, kind="stable")[:INSTANCES_SHOWN]
    return tuple({"location_mm": list(frame.location(int(flats[j]), int(layers[j]))),
                  "layers": [int(firsts[j]), int(lasts[j])], "measured": round(float(measured[j]), 4)}
                 for j in order)


def verdict_of(findings: list[Finding] | tuple[Finding, ...]) -> str:
    """Return the verdict: any blocker is not printable, any caution printable with cautions.

    Requirement findings do not count: a part can print well and still miss its targets (``meets_requirements``).
    """
    severities = {f.severity for f in findings if f.rule not in NOT_PRINTABILITY}
    if "blocker" in severities:
        return "not_printable"
    if "caution" in severities:
        return "printable_with_cautions"
    return "printable"


def sorted_by_severity(findings: list[Finding]) -> list[Finding]:
    """Return findings blockers first, then cautions, then notes, stable within a severity."""
    return sorted(findings, key=lambda f: SEVERITIES.index(f.severity))


# The rules' names in words, for every sentence, page and picture that names a rule.
RULE_LABELS = {
    "mesh_health": "Mesh health", "units": "Units", "build_fit": "Build volume", "min_feature": "Minimum feature",
    "min_gap": "Minimum gap", "min_hole": "Minimum hole", "aspect_ratio": "Slenderness", "overhang": "Overhang",
    "island": "Island", "trapped_volume": "Trapped resin", "period": "Lattice period", "phase_error": "Phase error",
    "focus": "Focus",
    "rf_table": "RF data range", "not_computed": "Not computed", "cell_model": "Cell model",
    "requirement": "Requirement",
}


def rule_label(rule: str) -> str:
    """Return the display name of a rule."""
    return RULE_LABELS.get(rule, rule.replace("_", " ").capitalize())
