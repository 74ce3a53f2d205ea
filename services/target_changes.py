"""What would meet the missed targets: the lab's other printers and materials, each tried, not guessed.

A target missed in loss or efficiency may be met in a less lossy material (on the same printer first); a
target lost in printing (met as designed) may be met on a printer with a finer grid or a tighter accuracy.
Each candidate is checked again where it matters: another printer re-slices the part at its grid and runs
the optics on that print; another material runs the optics on the same print with that material's data.
The designer's targets are then judged again. A generated part is also regenerated with the design variants
a designer would try first (``components.variants``: more levels, a thinner base, a matching layer, the other
cell kind), for the same printer, and each checked the same way (a variant the printer cannot make is
dropped). For an uploaded part, targets missed in focus, spot size or size are the design's to change and no
catalogue change is tried for them. Three candidates are kept, with the numbers they would give: the best, the
best meeting a target the others shown do not, then the next best.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from services import layers
from services.alternatives import KINDS, TriedChange, change_sentence, other_pairings
from services.components.base import smallest_printable_mm
from services.components.variants import design_variants
from services.errors import UnusableInput
from services.optics import cell_tables
from services.part import Part
from services.profiles import Material, PrinterProfile
from services.requirement_check import RequirementCheck, check_requirements, value_text, wanted_text
from services.settings import CheckSettings

SHOWN = 3
BUDGET_S = 45.0  # what-if runs after the check's own; each is about one optics stage
# A less lossy material can help these when they are missed as designed (the loss is the material's).
MATERIAL_BOUND = ("max_insertion_loss_db", "min_focusing_efficiency")
MISSED = ("missed", "lost_in_printing")


@dataclass(frozen=True, slots=True)
class TargetResult:
    """One previously missed target after the change."""

    label: str
    status: str
    value: float | None
    unit: str
    wanted: str

    def to_dict(self) -> dict:
        return {"label": self.label, "status": self.status, "value": self.value, "unit": self.unit,
                "wanted": self.wanted, "value_text": value_text(self.value, self.unit)}


@dataclass(frozen=True, slots=True)
class TargetChange(TriedChange):
    """One change tried for the missed targets, and how the targets fared after it."""

    met: int  # of the targets that were missed
    missed: int  # targets not met after the change (all stated targets)
    results: tuple[TargetResult, ...]
    note: str | None = None

    def to_dict(self) -> dict:
        return {"change": self.change, "kind": self.kind, "printer": self.printer, "material": self.material,
                "met": self.met, "missed": self.missed, "results": [r.to_dict() for r in self.results],
                "note": self.note}


OpticsRun = Callable[[Part, object, PrinterProfile, Material], dict | None]


def changes_for_targets(*, part: Part, stack, printer: PrinterProfile, material: Material, settings: CheckSettings,
                        targets: RequirementCheck, run_optics: OpticsRun,
                        catalogue: Sequence[tuple[PrinterProfile, Material]] | Callable[[], Sequence] = (),
                        budget_s: float = BUDGET_S, progress: Callable[[float], None] | None = None) -> list[TargetChange]:
    """Return up to three catalogue changes that meet missed targets, best first (empty when none is missed).

    ``part`` is the oriented part and ``stack`` its print on ``printer``; ``run_optics(part, stack, printer,
    material)`` returns the optics section as a dict (the check's own optics stage); ``catalogue`` is the
    lab's (printer, material) pairs, or a function returning them (called only when a target is missed).
    ``budget_s`` bounds the work: candidates are tried in order, and the search stops before one that would
    likely end past the budget (judged by the slowest so far). A candidate that needs a rigorous cell table not
    yet in the cache is not tried (it says so): building one costs about a minute.
    """
    missed = [o for o in targets.outcomes if o.status in MISSED]
    material_bound = any(o.requirement in MATERIAL_BOUND for o in missed)
    printer_bound = any(o.status == "lost_in_printing" for o in missed)
    designs = design_variants(part.parameters, smallest_mm=smallest_printable_mm(printer)) if missed else []
    if not (material_bound or printer_bound or designs):
        return []
    pairs = catalogue() if callable(catalogue) else catalogue
    candidates = [("design", printer, material, d) for d in designs]
    candidates += [(*c, None) for c in _candidates(printer, material, pairs, material_bound=material_bound,
                                                   printer_bound=printer_bound)]
    tried: list[TargetChange] = []
    start, slowest = time.monotonic(), 0.0
    for i, candidate in enumerate(candidates):
        began = time.monotonic()
        if began - start + slowest > budget_s:
            break
        with cell_tables.cached_only():
            tried.append(_try(part, stack, printer, candidate, settings, missed, run_optics))
        slowest = max(slowest, time.monotonic() - began)
        if progress:
            progress((i + 1) / len(candidates))
    better = [c for c in tried if c.met > 0]
    better.sort(key=lambda c: (c.missed, -c.met, ORDER.index(c.kind)))
    return _shown(better)


def _shown(better: list[TargetChange]) -> list[TargetChange]:
    """Return up to ``SHOWN`` of the changes (best first): the best, then the best one meeting a target none shown
    meets, then the next best. Three materials that each meet the loss but miss the focus would otherwise hide
    the design change that meets the focus."""
    shown: list[TargetChange] = []
    covered: set[str] = set()
    for change in better:
        meets = {r.label for r in change.results if r.status == "met"}
        if len(shown) < SHOWN and (not shown or meets - covered):
            shown.append(change)
            covered |= meets
    shown += [c for c in better if c not in shown][:SHOWN - len(shown)]
    return sorted(shown, key=better.index)


ORDER = ("design", *KINDS)  # least disruptive first: the same printer and material, then the catalogue's


def _candidates(printer, material, pairs, *, material_bound: bool, printer_bound: bool):
    """Return (kind, printer, material) to try: other materials on this printer, then other printers."""
    wanted = {"material": material_bound, "printer": printer_bound, "printer_and_material": material_bound}
    return [c for c in other_pairings(printer, material, pairs) if wanted[c[0]]]


def _regenerated(part: Part, params: dict, printer, material, settings):
    """Build the design variant for this printer and orient and slice it as the check did; refuse one with blockers."""
    from services.components import build_component
    from services.rules import run_rules

    built = layers.orient_part(build_component(part.parameters["kind"], params, material=material,
                                               printer=printer).part, settings.orientation)
    stack = layers.build_layer_stack(built, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)
    blockers = [f for f in run_rules(stack=stack, part=built, printer=printer).findings if f.severity == "blocker"]
    if blockers:
        raise UnusableInput("variant_not_printable", f"the printer cannot make it: {blockers[0].message}")
    return built, stack


def _try(part, stack, own_printer, candidate, settings, missed, run_optics) -> TargetChange:
    """Check the targets again with this design, printer and material; a refusal counts as nothing met."""
    kind, printer, material, design = candidate
    note = None
    try:
        if design is not None:
            part, stack = _regenerated(part, design[1], printer, material, settings)
        elif printer.slug != own_printer.slug:
            stack = layers.build_layer_stack(part, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)
        optics = run_optics(part, stack, printer, material)
        after = check_requirements(settings.requirements, optics=optics, bbox_mm=part.bbox_mm,
                                   printed_thickness_mm=stack.count * stack.layer_height_mm)
    except UnusableInput as exc:
        after, note = None, exc.message
    change = f"regenerate it with {design[0]}" if design is not None else change_sentence(kind, printer, material)
    if after is None:
        return TargetChange(change, kind, printer.slug, material.slug, 0, len(missed), (), note)
    by_name = {o.requirement: o for o in after.outcomes}
    results = []
    for before in missed:
        o = by_name.get(before.requirement)
        if o is None:
            continue
        value = o.as_designed if o.status == "missed" else o.as_printed
        if o.status == "lost_in_printing" and o.tolerance_worst is not None and value is not None and \
                _inside(o, value):
            value = o.tolerance_worst  # nominal met, an end of the tolerance band missed: show the miss
        results.append(TargetResult(o.label, o.status, value, o.unit, wanted_text(o)))
    if kind == "design":
        note = "a new design: check it again before printing (its size, print time and cost change too)"
    elif kind != "printer":
        note = "the material's other properties (strength, heat, cost) are not compared; check them before printing"
    return TargetChange(change, kind, printer.slug, material.slug, met=sum(r.status == "met" for r in results),
                        missed=sum(o.status != "met" for o in after.outcomes), results=tuple(results), note=note)


def _inside(o, value: float) -> bool:
    return (o.low is None or value >= o.low) and (o.high is None or value <= o.high)

