"""Units: the file's or the user's unit, the part's extent, and the unit that would make it plausible."""

from __future__ import annotations

import numpy as np

from services.findings import Finding
from services.intake.common import IntakeLimits, _num, _refuse


UNITS = {"mm": 1.0, "um": 1e-3, "m": 1e3, "inch": 25.4, "cm": 10.0}


# The values of <model unit="..."> in the 3MF core specification, with our label and size in mm.
_3MF_UNITS = {
    "micron": ("um", 1e-3), "millimeter": ("mm", 1.0), "centimeter": ("cm", 10.0),
    "inch": ("inch", 25.4), "foot": ("ft", 304.8), "meter": ("m", 1000.0),
}


# A lens, phase plate or matching layer for mm-wave to THz beams spans about 1 mm to 1 m (common practice).
PLAUSIBLE_EXTENT_MM = (1.0, 1000.0)


def _resolve_unit(file_unit: str | None, units: str | None, *, name: str) -> tuple[str, float, list[Finding]]:
    """Return the unit label, its size in mm and any note; a 3MF's own unit wins over the user's."""
    if file_unit is None:
        unit = units or "mm"
        return unit, UNITS[unit], []
    label, scale = _3MF_UNITS[file_unit]
    if units is None or UNITS[units] == scale:
        return label, scale, []
    note = Finding("units", "note", f"{name}: the 3MF file states its unit as {file_unit}, so {label} was used "
                   f"instead of the {units} you chose.")
    return label, scale, [note]


def _largest_extent_mm(vertices: np.ndarray, *, scale: float = 1.0) -> float:
    """Return the part's largest axis-aligned extent, for vertices in a unit of ``scale`` mm.

    Column by column, since numpy reduces a tall (n, 3) array along its rows several times slower; scaling the
    extremes gives the extremes of the scaled vertices exactly (a positive scale keeps the order).
    """
    return max(float(column.max()) * scale - float(column.min()) * scale for column in vertices.T)


def _plausible_unit(raw_extent: float) -> tuple[str, float] | None:
    """Return the unit (and resulting mm size) that makes an extent most plausible, if any does."""
    lo, hi = PLAUSIBLE_EXTENT_MM
    fits = {u: raw_extent * s for u, s in UNITS.items() if lo <= raw_extent * s <= hi}
    if not fits:
        return None
    middle = np.sqrt(lo * hi)  # the geometric middle of the plausible range
    best = min(fits, key=lambda u: abs(np.log(fits[u] / middle)))
    return best, fits[best]


def _check_extent(extent: float, *, name: str, limits: IntakeLimits, unit: str, scale: float) -> None:
    """Refuse a part larger than the extent limit (mm), saying which unit would make it plausible."""
    if extent <= limits.max_extent_mm:
        return
    better = _plausible_unit(extent / scale)
    hint = f"if it was drawn in {better[0]}, upload it again with units {better[0]}" if better else \
        "scale it to its real size"
    raise _refuse("too_large_extent", name, f"read in {unit} the part is {_num(extent)} mm across, beyond the "
                  f"{_num(limits.max_extent_mm)} mm limit; {hint}.")


def _units_finding(extent: float, *, name: str, unit: str, scale: float, from_file: bool) -> Finding | None:
    """Return a caution when the part (``extent`` mm across) is implausibly small or large for a quasi-optical part."""
    lo, hi = PLAUSIBLE_EXTENT_MM
    if extent <= 0 or lo <= extent <= hi:
        return None
    size = "small" if extent < lo else "large"
    better = _plausible_unit(extent / scale)
    if better is None:
        hint = "no unit we know makes it 1 to 1,000 mm across, so check the model's scale"
    else:
        how = "set that unit in the file and export it again" if from_file else \
            f"upload it again with units {better[0]}"
        hint = f"if it was drawn in {better[0]} it is {_num(better[1])} mm across: {how}"
    message = (f"{name}: read in {unit} the part is {_num(extent)} mm across at its largest, implausibly {size} "
               f"for a quasi-optical part; {hint}.")
    return Finding("units", "caution", message, measured=extent, limit=lo if extent < lo else hi, unit="mm")
