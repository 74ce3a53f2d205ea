"""The pipeline: part + printer profile + material + settings -> Report.

bytes or parameters -> Part -> LayerStack -> findings, estimate, optics -> Report.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

from services import layers, pictures
from services.alternatives import what_must_change
from services.errors import UnusableInput
from services.findings import Finding, sorted_by_severity, verdict_of
from services.limits import release_free_heap
from services.part import Part
from services.part_view import PreparedViews, part_view_json, prepare_views
from services.profiles import Material, PrinterProfile, check_pairing
from services.rules import run_rules, scan
from services.rules.build_fit import check_build_fit
from services.requirement_check import check_requirements
from services.target_changes import changes_for_targets
from services.safety import cautions_for
from services.settings import CheckSettings
from services.stages import EitherBranch, Progress, Stages
from services.units_physics import units_findings

if TYPE_CHECKING:
    from services.estimate.calibration import Calibration

SCHEMA = "phasewright.report/1"
PART_VIEW_FILE = "part-view.json"
# Files a stored report holds besides its pictures (the pictures are listed in its "figures").
EXTRA_FILES = ("transmission.s2p", PART_VIEW_FILE)

# Share of the progress bar each stage takes, in run order (slicing and optics dominate).
STAGES = (("reading", 0.02), ("slicing", 0.28), ("rules", 0.28), ("estimate", 0.05), ("optics", 0.23), ("views", 0.02),
          ("pictures", 0.05), ("alternatives", 0.04), ("target_changes", 0.03))



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
    meets_requirements: str = "not_stated"
    requirements: dict | None = None
    part_view: str | None = None  # the 3D view's JSON (services.part_view), stored as PART_VIEW_FILE
    what_to_change: tuple = ()  # services.alternatives.Alternative, best first (empty when nothing blocks)
    changes_unfinished: tuple = ()  # sentences of the changes the search's budget left unfinished, in trying order
    target_changes: tuple = ()  # services.target_changes.TargetChange, best first (empty when no target is missed)

    def to_dict(self) -> dict:
        return {
            "schema": SCHEMA,
            "design": self.design,
            "printer": self.printer,
            "material": self.material,
            "settings": self.settings,
            "layers": self.layers,
            "verdict": self.verdict,
            "meets_requirements": self.meets_requirements,
            "requirements": self.requirements,
            "findings": [f.to_dict() for f in self.findings],
            "estimate": self.estimate,
            "optics": self.optics,
            "build": self.build,
            "cautions": list(self.cautions),
            "figures": sorted(self.figures),
            "part_view": PART_VIEW_FILE if self.part_view else None,
            "what_to_change": [a.to_dict() for a in self.what_to_change],
            "changes_unfinished": list(self.changes_unfinished),
            "target_changes": [c.to_dict() for c in self.target_changes],
            "timings_s": self.timings_s,
        }


def build_report(*, part: Part, printer: PrinterProfile, material: Material,
                 settings: CheckSettings | None = None, progress: Progress | None = None,
                 calibration: Calibration | None = None,
                 alternatives: Sequence[tuple[PrinterProfile, Material]] | Callable[[], Sequence] = (),
                 concurrent_stages: bool = True) -> Report:
    """Check a part on one printer and material and return the report.

    ``calibration`` is the printer's print-time correction from logged prints (None: uncalibrated).
    ``alternatives`` are the lab's other (printer, material) pairs, tried when something blocks the print.
    ``concurrent_stages`` runs rules and estimate in one thread beside optics in another (False: one after
    the other, for debugging, or where memory is tight: side by side, both stages' working sets are held at once).
    """
    settings = settings or CheckSettings()
    check_pairing(printer, material)  # before the slicing, not after it
    stages = Stages(STAGES, progress)
    oriented = stages.run("reading", lambda p: layers.orient_part(part, settings.orientation))
    stack = stages.run("slicing", lambda p: layers.build_layer_stack(
        oriented, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm, progress=p))
    release_free_heap()  # what the slicing's threads freed, before the rules and optics allocate beside each other
    fit_findings, build = check_build_fit(oriented, printer)
    solid = _has_solid(stack)
    rules, estimate, optics, (prepared, drawn) = _rules_estimate_optics(
        stages, part=part, oriented=oriented, stack=stack, printer=printer, material=material, settings=settings,
        calibration=calibration, concurrent=concurrent_stages and solid)
    figures = {**rules.figures, **(optics.figures if optics else {})}
    targets = check_requirements(settings.requirements, optics=optics.to_dict() if optics else None,
                                 bbox_mm=oriented.bbox_mm, printed_thickness_mm=stack.count * stack.layer_height_mm)
    findings = sorted_by_severity([*part.findings, *_units_from_physics(part, printer, settings), *fit_findings,
                                   *rules.findings, *(optics.findings if optics else ()),
                                   *([] if solid else [_no_solid_note(part, printer)]), *targets.findings])
    sections, blanked = finite_sections({"design": part.summary(), "layers": stack.summary(),
                                         "estimate": estimate.to_dict() if estimate else None,
                                         "optics": optics.to_dict() if optics else None,
                                         "build": {**build, **rules.summary}})
    findings = [*map(_finite_finding, findings), *_blanked_findings(part.name, blanked)]
    overview, view = stages.run("pictures", lambda p: (_overview_pictures(drawn, findings),
                                                       part_view_json(oriented, stack, findings, prepared)))
    figures.update(overview)
    # The alternatives re-run the mesh, build-fit and rule checks only, so only their blockers go in: a change is
    # never said to remove a blocker it did not check again (the optics' phase error, the targets).
    rechecked = [_finite_finding(f) for f in (*part.findings, *fit_findings, *rules.findings)]
    unfinished: list[str] = []
    to_change = stages.run("alternatives", lambda p: what_must_change(
        part=part, printer=printer, material=material, settings=settings, findings=rechecked,
        catalogue=alternatives, progress=p, at_once=2 if concurrent_stages else 1, unfinished=unfinished,
        rules_s_per_work=_rules_pace(stages, stack), stack=stack))
    to_meet = stages.run("target_changes", lambda p: changes_for_targets(
        part=oriented, stack=stack, printer=printer, material=material, settings=settings, targets=targets,
        run_optics=lambda part_, stack_, printer_, material_: _optics(
            part_, stack_, printer_, material_, settings, with_figures=False).to_dict(),
        catalogue=alternatives, progress=p))
    return Report(
        design=sections["design"], printer=printer.to_dict(), material=material.to_dict(),
        settings=settings.to_dict(), layers=sections["layers"], verdict=verdict_of(findings),
        findings=tuple(findings), estimate=sections["estimate"], optics=sections["optics"], build=sections["build"],
        cautions=tuple(cautions_for(printer.process)), timings_s=stages.timings_s,
        figures=figures, touchstone=optics.touchstone if optics else None, part_view=view,
        meets_requirements=targets.meets, requirements=targets.to_dict() if settings.requirements else None,
        what_to_change=tuple(to_change), changes_unfinished=tuple(unfinished), target_changes=tuple(to_meet),
    )


def _rules_estimate_optics(stages: Stages, *, part, oriented, stack, printer, material, settings, calibration,
                           concurrent: bool):
    """Return (rules, estimate, optics, (prepared views, pictures drawn up to their markers)): rules then estimate
    (it needs their support volume), optics beside them, and the finding-free half of the pictures in whichever
    branch ends its own work first.

    Both branches only read the stack and the part. Whether run side by side or in order, the
    outcome is the same, errors included (see Stages.side_by_side).
    """
    solid = _has_solid(stack)
    views = EitherBranch(stages, "views", lambda p: _prepared_views(oriented, stack))

    def printability():
        rules = stages.run("rules", lambda p: run_rules(stack=stack, part=oriented, printer=printer, progress=p))
        _solid_or_refuse(stack, part, printer)
        estimate = stages.run("estimate", lambda p: _estimate(stack, oriented, printer, material, settings, rules,
                                                              calibration) if solid else None)
        views.take()
        return rules, estimate

    def optics():
        seen = stages.run("optics", lambda p: _optics(oriented, stack, printer, material, settings, p) if solid else None)
        views.take()
        return seen

    (rules, estimate), seen = (stages.side_by_side(printability, optics) if concurrent
                               else (printability(), optics()))
    release_free_heap()  # before the pictures and the tried changes: what the two branches freed
    return rules, estimate, seen, views.result()


def _rules_pace(stages: Stages, stack) -> float | None:
    """Return this check's rules seconds per unit of work (``scan.pass_work``), to project a tried change's."""
    spent, work = stages.timings_s.get("rules"), scan.pass_work(stack) if stack.count else 0.0
    return spent / work if spent and work else None


def finite_sections(sections: dict) -> tuple[dict, list[str]]:
    """Return the sections with every NaN or infinite number replaced by None, and where each was.

    JSON has no NaN (PostgreSQL's jsonb refuses it) and a reader cannot act on one: a value that
    could not be computed is left blank and named instead.
    """
    blanked: list[str] = []

    def clean(value, path: str):
        if isinstance(value, float) and not math.isfinite(value):
            blanked.append(path)
            return None
        if isinstance(value, dict):
            return {k: clean(v, f"{path}.{k}" if path else str(k)) for k, v in value.items()}
        if isinstance(value, (list, tuple)):
            return [clean(v, f"{path}[{i}]") for i, v in enumerate(value)]
        return value

    return clean(sections, ""), blanked


def _finite_finding(finding: Finding) -> Finding:
    """Return the finding with a non-finite measured value or limit left blank."""
    bad = [key for key in ("measured", "limit") if not math.isfinite(getattr(finding, key) or 0.0)]
    return replace(finding, **dict.fromkeys(bad)) if bad else finding


def _blanked_findings(name: str, blanked: list[str]) -> list[Finding]:
    """Return a note naming the values that could not be computed, if any."""
    if not blanked:
        return []
    shown = ", ".join(blanked[:5]) + (f" and {len(blanked) - 5:,} more" if len(blanked) > 5 else "")
    return [Finding("not_computed", "note", f"{name}: {len(blanked):,} values could not be computed and are left "
                    f"blank ({shown}); the rest of the report stands.", count=len(blanked))]


def _has_solid(stack) -> bool:
    return bool(stack.count) and bool((stack.area_mm2 > 0).any())


def _solid_or_refuse(stack, part: Part, printer: PrinterProfile) -> bool:
    """Return True when the layer stack holds solid; without it, refuse unless intake already blocked the part.

    An open surface (one triangle, a sheet) slices to nothing; its blocker says what to fix, so the
    report stands without an estimate rather than the check failing with "empty part".
    """
    if _has_solid(stack):
        return True
    if any(f.severity == "blocker" for f in part.findings):
        return False
    raise UnusableInput("empty_part", f"{part.name}: the part has no solid at this printer's "
                        f"{printer.pixel_mm:g} mm pixel and {printer.layer_height_mm:g} mm layers; check the units "
                        "and the part's size.")


def _no_solid_note(part: Part, printer: PrinterProfile) -> Finding:
    return Finding("not_computed", "note", f"{part.name}: no estimate and no optics: the part encloses no solid at "
                   f"this printer's {printer.pixel_mm:g} mm pixel and {printer.layer_height_mm:g} mm layers; fix the "
                   "blockers above first.")


def _units_from_physics(part: Part, printer: PrinterProfile, settings: CheckSettings) -> list[Finding]:
    """Return a units caution when the part's size makes no sense at its design frequency."""
    freqs = settings.effective_optics(part.parameters).freqs_ghz
    return units_findings(extent_mm=max(part.bbox_mm), unit=part.units, freqs_ghz=freqs,
                          build_volume_mm=printer.build_volume_mm)


def _estimate(stack, part, printer, material, settings, rules, calibration=None):
    from services.estimate import estimate_print

    support = rules.summary.get("overhang", {}).get("support_volume_mm3")
    return estimate_print(stack=stack, part=part, printer=printer, material=material,
                          quantities=settings.quantities, support_volume_mm3=support, calibration=calibration)


def _optics(part, stack, printer, material, settings, progress=None, with_figures=True):
    from services.optics import optics_report

    return optics_report(part=part, printed=stack, material=material, printer=printer,
                         settings=settings.effective_optics(part.parameters), progress=progress,
                         with_figures=with_figures)


def _prepared_views(oriented, stack) -> tuple[PreparedViews, dict[str, pictures.Drawn]]:
    """Return what the views draw before the findings are known: the decimated mesh and layer outlines, and the
    views a designer looks at first, from above and in perspective, drawn up to their markers.

    The perspective draws the prepared (decimated) mesh, the one the 3D view shows. Drawn here, beside the
    rules, the pictures are the same as drawn after them; only the markers wait for the findings.
    """
    prepared = prepare_views(oriented, stack)
    thick = stack.thickness_mm
    drawn = {
        "thickness_map.png": pictures.map_drawn(thick, pixel_mm=stack.pixel_mm, unit="mm", mask=thick > 0,
                                                origin_mm=stack.origin_mm[:2],
                                                title="As-printed thickness, seen from above (+z)"),
        "perspective.png": pictures.perspective_drawn(prepared.vertices_mm, prepared.faces,
                                                      title="The part as built, in perspective (build plate below)"),
    }
    return prepared, drawn


def _overview_pictures(drawn: dict[str, pictures.Drawn], findings: list[Finding]) -> dict[str, bytes]:
    """Return the views a designer looks at first with the findings numbered on them.

    A marker's number is the finding's place in the report's (sorted) list, counting from 1.
    """
    markers = finding_markers(findings)
    return {name: picture.finish(markers) for name, picture in drawn.items()}


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
