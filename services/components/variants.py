"""Design variants of a generated part: the parameter changes a designer would try first when a target is missed.

Each variant changes one parameter in the direction that usually helps the optics (common practice): more phase
levels or steps (a smaller quantisation loss, sinc^2(1/N) for N levels), a thinner base (less absorption), a
matching layer on a window (less reflection), the other cell kind or a finer period on a graded plate (a
different phase range and accuracy), or a coarser one where the printer clipped its cells (a wider range of
fills). None is assumed to help: the caller builds each and checks it again.
"""

from __future__ import annotations

from services.components.specs import component_parameters, spoken_name
from services.errors import UnusableInput


def design_variants(parameters: dict | None, *, smallest_mm: float = 0.0) -> list[tuple[str, dict]]:
    """Return (change in words, the full parameters) for each variant of a generated part; empty for an upload.

    ``parameters`` is the part's own record (kind, its parameters and what the generator worked out);
    ``smallest_mm`` is the printer's smallest printable size, below which no thickness is proposed.
    """
    p = parameters or {}
    kind = p.get("kind")
    try:
        names = [s.name for s in component_parameters(kind)] if kind else []
    except UnusableInput:  # an unknown kind recorded by an older version: no variants
        return []
    given = {n: p[n] for n in names if p.get(n) is not None}
    changes: list[tuple[str, object]] = []
    if kind == "multilevel" and int(given.get("levels", 4)) < 16:
        changes.append(("levels", min(16, 2 * int(given.get("levels", 4)))))
    if kind == "spiral" and int(given.get("steps", 0)) > 0:
        changes.append(("steps", 0 if int(given["steps"]) >= 64 else 2 * int(given["steps"])))
    if kind == "window" and given.get("matching") == "none":
        changes.append(("matching", "grooves"))
    if kind == "graded-index":
        changes.append(("cell", "hole" if given.get("cell", "pillar") == "pillar" else "pillar"))
        if given.get("period_mm"):
            changes.append(("period_mm", round(0.8 * float(given["period_mm"]), 4)))
            coarser = coarser_period_mm(p, float(given["period_mm"]))
            if coarser is not None:
                changes.append(("period_mm", coarser))
    for name in ("base_thickness_mm", "min_thickness_mm"):
        value = given.get(name)
        if value and 0.5 * float(value) >= smallest_mm:
            changes.append((name, round(0.5 * float(value), 4)))
    return [(_words(name, value, given.get(name)), {**given, name: value}) for name, value in changes]


def coarser_period_mm(record: dict, period_mm: float) -> float | None:
    """Return a coarser period for a graded plate whose cells the printer clipped (one in twenty or more), else None.

    The printer's smallest hole (or pillar) and wall take a smaller share of a larger cell, so a coarser lattice
    spans a wider range of fills: the same phase in less height, so less absorption (the default hole plate on
    a 50 um resin printer: fills 0.46-0.75 and 15.1 mm at a 0.9 mm period, 0.40-0.88 and 9.6 mm at 1.3 mm). It
    stays within three quarters of the no-diffraction limit: the check reads the variant with rigorous cell
    tables at its own period, less surely as the period nears that limit (docs/rigorous-cells.md).
    """
    limit, clipped, cells = record.get("period_limit_mm"), record.get("cells_clipped"), record.get("cells")
    if not limit or not clipped or not cells or clipped < CLIPPED_SHARE * cells:
        return None
    coarser = round(min(COARSER_PERIOD_STEP * period_mm, COARSEST_PERIOD_FRACTION * float(limit)), 3)
    return coarser if coarser > 1.05 * period_mm else None


CLIPPED_SHARE = 0.05            # a plate whose printer clipped this share of its cells or more is offered ...
COARSER_PERIOD_STEP = 1.4        # ... a coarser period: 1.4 times its own ...
COARSEST_PERIOD_FRACTION = 0.75  # ... but no more than this share of the no-diffraction limit (engineering judgement)


def _words(name: str, value, was) -> str:
    """Return a change in words: "8 levels (was 4)", "a continuous ramp (was 64 steps)", "base thickness 0.5 mm (was 1 mm)"."""
    if name == "steps" and value == 0:
        return f"a continuous ramp (was {was} steps)"
    if name in ("levels", "steps"):
        return f"{value} {name} (was {was})"
    spoken = spoken_name(name).removeprefix("The ")
    if name.endswith("_mm"):
        return f"{spoken} {float(value):g} mm (was {float(was):g} mm)"
    return f"{spoken} {value} (was {was})"
