"""The pipeline: part + printer profile + material + settings -> Report.

bytes or parameters -> Part -> LayerStack -> findings, estimate, optics -> Report.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from services import layers, pictures
from services.findings import Finding, sorted_by_severity, verdict_of
from services.part import Part
from services.profiles import Material, PrinterProfile, check_pairing
from services.rules import run_rules
from services.rules.build_fit import check_build_fit
from services.safety import cautions_for
from services.settings import CheckSettings

if TYPE_CHECKING:
    from services.estimate.calibration import Calibration

SCHEMA = "phasewright.report/1"

# Share of the progress bar each stage takes, in run order (slicing and optics dominate).
STAGES = (("reading", 0.02), ("slicing", 0.30), ("rules", 0.30), ("estimate", 0.05), ("optics", 0.28), ("pictures", 0.05))

Progress = Callable[[str, float], None]


@dataclass(frozen=True, slots=True)
class Report:
    """What a check produces. ``figures`` maps a file name to PNG bytes; the rest is JSON-ready."""

    design: dict
    printer: dict
    material: dict
    settings: dict
    layers: dict
    verdict: str
    findings: tuple[Finding, ...]
    estimate: dict | None
    optics: dict | None
    build: dict
    cautions: tuple[str, ...]
    timings_s: dict
    figures: dict = field(default_factory=dict)
    touchstone: str | None = None

    def to_dict(self) -> dict:
        return {
            "schema": SCHEMA,
            "design": self.design,
            "printer": self.printer,
            "material": self.material,
            "settings": self.settings,
            "layers": self.layers,
            "verdict": self.verdict,
            "findings": [f.to_dict() for f in self.findings],
            "estimate": self.estimate,
            "optics": self.optics,
            "build": self.build,
            "cautions": list(self.cautions),
            "figures": sorted(self.figures),
            "timings_s": self.timings_s,
        }


class _Stages:
    """Turn per-stage fractions into one overall progress call, and time each stage."""

    def __init__(self, progress: Progress | None) -> None:
        self.progress = progress
        self.timings_s: dict[str, float] = {}
        self._start = dict.fromkeys((s for s, _ in STAGES), 0.0)
        acc = 0.0
        for name, share in STAGES:
            self._start[name] = acc
            acc += share
        self._share = dict(STAGES)

    def run(self, name: str, step: Callable[[Callable[[float], None]], object]):
        """Run ``step(progress)`` as stage ``name`` and time it."""
        t0 = time.perf_counter()
        self.report(name, 0.0)
        result = step(lambda fraction: self.report(name, fraction))
        self.timings_s[name] = round(time.perf_counter() - t0, 3)
        self.report(name, 1.0)
        return result

    def report(self, name: str, fraction: float) -> None:
        if self.progress:
            self.progress(name, min(1.0, self._start[name] + self._share[name] * max(0.0, min(1.0, fraction))))


def build_report(*, part: Part, printer: PrinterProfile, material: Material,
                 settings: CheckSettings | None = None, progress: Progress | None = None,
                 calibration: Calibration | None = None) -> Report:
    """Check a part on one printer and material and return the report.

    ``calibration`` is the printer's print-time correction from logged prints (None: uncalibrated).
    """
    settings = settings or CheckSettings()
    check_pairing(printer, material)  # before the slicing, not after it
    stages = _Stages(progress)
    oriented = stages.run("reading", lambda p: layers.orient_part(part, settings.orientation))
    stack = stages.run("slicing", lambda p: layers.build_layer_stack(
        oriented, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm, progress=p))
    fit_findings, build = check_build_fit(oriented, printer)
    rules = stages.run("rules", lambda p: run_rules(stack=stack, part=oriented, printer=printer, progress=p))
    estimate = stages.run("estimate", lambda p: _estimate(stack, oriented, printer, material, settings, rules, calibration))
    optics = stages.run("optics", lambda p: _optics(oriented, stack, printer, material, settings, p))
    figures = {**rules.figures, **(optics.figures if optics else {})}
    findings = sorted_by_severity([*part.findings, *fit_findings, *rules.findings, *(optics.findings if optics else ())])
    figures.update(stages.run("pictures", lambda p: _overview_pictures(stack, oriented, findings)))
    return Report(
        design=part.summary(), printer=printer.to_dict(), material=material.to_dict(),
        settings=settings.to_dict(), layers=stack.summary(), verdict=verdict_of(findings),
        findings=tuple(findings), estimate=estimate.to_dict() if estimate else None,
        optics=optics.to_dict() if optics else None, build={**build, **rules.summary},
        cautions=tuple(cautions_for(printer.process)), timings_s=stages.timings_s,
        figures=figures, touchstone=optics.touchstone if optics else None,
    )


def _estimate(stack, part, printer, material, settings, rules, calibration=None):
    from services.estimate import estimate_print

    support = rules.summary.get("overhang", {}).get("support_volume_mm3")
    return estimate_print(stack=stack, part=part, printer=printer, material=material,
                          quantities=settings.quantities, support_volume_mm3=support, calibration=calibration)


def _optics(part, stack, printer, material, settings, progress=None):
    from services.optics import optics_report

    return optics_report(part=part, printed=stack, material=material, printer=printer,
                         settings=settings.optics, progress=progress)


def _overview_pictures(stack, part: Part, findings: list[Finding]) -> dict[str, bytes]:
    """Return the views a designer looks at first: from above and in perspective, findings numbered.

    A marker's number is the finding's place in the report's (sorted) list, counting from 1.
    """
    markers = finding_markers(findings)
    thick = stack.thickness_mm
    top = pictures.map_png(thick, pixel_mm=stack.pixel_mm, unit="mm", mask=thick > 0, markers=markers,
                           origin_mm=stack.origin_mm[:2], title="As-printed thickness, seen from above (+z)")
    view = pictures.perspective_png(part.vertices_mm, part.faces, markers=markers,
                                    title="The part as built, in perspective (build plate below)")
    return {"thickness_map.png": top, "perspective.png": view}


def finding_markers(findings, limit: int = 30) -> tuple[pictures.Marker, ...]:
    """Return numbered markers for the findings that have a location; findings at one spot share one.

    Findings within 0.5 mm of each other get one marker labelled "1, 2" in the colour of the worst.
    """
    spots: dict[tuple, list] = {}
    for i, f in enumerate(findings, start=1):
        if f.location_mm is not None:
            key = tuple(round(v * 2) for v in f.location_mm)
            spots.setdefault(key, []).append((i, f))
    markers = [pictures.Marker(tuple(group[0][1].location_mm), ", ".join(str(i) for i, _ in group),
                               group[0][1].severity) for group in spots.values()]
    return tuple(markers[:limit])
