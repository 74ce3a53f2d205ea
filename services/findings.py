"""Findings (one problem or remark about a part) and the verdict they add up to."""

from __future__ import annotations

from dataclasses import asdict, dataclass

SEVERITIES = ("blocker", "caution", "note")

RULES = (
    "mesh_health", "units", "build_fit", "min_feature", "min_gap", "min_hole", "aspect_ratio",
    "overhang", "island", "trapped_volume", "period", "phase_error", "rf_table",
)


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

    def __post_init__(self) -> None:
        if self.severity not in SEVERITIES:
            raise ValueError(f"unknown severity {self.severity!r}")
        if self.rule not in RULES:
            raise ValueError(f"unknown rule {self.rule!r}")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["location_mm"] = list(self.location_mm) if self.location_mm is not None else None
        d["layers"] = list(self.layers) if self.layers is not None else None
        return d


def verdict_of(findings: list[Finding] | tuple[Finding, ...]) -> str:
    """Return the verdict: any blocker is not printable, any caution printable with cautions."""
    severities = {f.severity for f in findings}
    if "blocker" in severities:
        return "not_printable"
    if "caution" in severities:
        return "printable_with_cautions"
    return "printable"


def sorted_by_severity(findings: list[Finding]) -> list[Finding]:
    """Return findings blockers first, then cautions, then notes, stable within a severity."""
    return sorted(findings, key=lambda f: SEVERITIES.index(f.severity))
