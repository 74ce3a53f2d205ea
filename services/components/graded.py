"""Graded-index plates: a flat plate of subwavelength pillars or holes whose local delay is a lens.

Each cell's size is chosen so that its delay matches the thin-lens phase (2 pi / lambda)(sqrt(r^2
+ f^2) - f) modulo 2 pi (optics notes section 8), within the sizes the printer can make; the phase
error that costs is reported. The delay comes from the check's own cell model
(``optics.cell_model.declared_cell_index``): a rigorous table for the square or hexagonal lattice, read
from (or written to) the cache under the key the check will ask for, so the phase designed is the phase
the check predicts.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import manifold3d as m3d
import numpy as np

from services.components.base import CellLayout, Component, Context, finish, wrap_pi
from services.components.cells import cell_s21, delay_rad, material_fill
from services.components.formulas import (
    Medium, check_f_number, largest_micron_below, medium_at, no_diffraction_period_mm, thin_lens_path_mm,
)
from services.components.solid import check_fits, checked, disc, equal_area_radius, segments_for, subtract, union
from services.errors import UnusableInput
from services.optics.cell_model import CellIndex, declared_cell_index
from services.optics.cell_tables import TERMS, reusing_modes
from services.optics.effective_medium import DEFAULT_MODEL
from services.optics.materials import rf_values

MAX_CELLS = 50_000
GRID = 1024  # cell sizes tried between none and touching: steps of 0.1 % of the period
# Without a printer, neighbours stay 2 % of a period apart and no wall or pillar is thinner, so no
# two solids ever touch along an edge (engineering judgement).
GEOMETRIC_MARGIN = 0.02
# A default height above ten wavelengths means the printable cells span too little phase to be
# worth printing as a lens (engineering judgement).
MAX_AUTO_HEIGHT_WAVELENGTHS = 10.0
# The default period keeps p n / lambda at 0.5 at the highest frequency: there the effective medium
# is still within 7 deg of the rigorous cells for pillars and the tables' equivalent layer within
# 1 deg (docs/rigorous-cells.md), so a cell in a graded lattice sits close to the periodic cell its
# table describes; at the diffraction limit (1.0) every model is off by 100 deg or more.
ACCURATE_PERIOD_FRACTION = 0.5
# Fourier terms of the generator's tables: the check's, so both read one cache file (tests lower it).
TABLE_TERMS = TERMS
# The height of the table a generator reads before it has chosen its own (the layer modes, hence the
# delays at any height, do not depend on it).
PROBE_HEIGHT_MM = 1.0


@dataclass(frozen=True, slots=True, eq=False)
class Library:
    """Cell sizes from none to touching, what each one does, and which ones the printer can make."""

    diameter_mm: np.ndarray
    fill: np.ndarray
    s21: np.ndarray
    allowed: np.ndarray
    limits_mm: dict
    model: np.ndarray

    @property
    def delay_rad(self) -> np.ndarray:
        return delay_rad(self.s21)


@dataclass(frozen=True, slots=True, eq=False)
class Design:
    """The cell model a plate is designed with: the check's (same table, same fills to layers) and why."""

    index: CellIndex
    why: str
    eps: complex


def build_graded_index(ctx: Context) -> Component:
    """Return the graded-index plate and its cell layout."""
    p = ctx.params
    check_f_number(p["focal_length_mm"], p["diameter_mm"], "graded-index plate")
    if p["cell"] == "pillar" and p["base_thickness_mm"] <= 0:
        raise UnusableInput("bad_parameter", "Pillars need a base to stand on: give a base thickness above 0 mm.")
    medium, period, limit, rule = _period(ctx)
    segments = segments_for(period / 2)
    xy = lattice_points(p["diameter_mm"] / 2, period, p["lattice"])
    with reusing_modes():
        design = _design(ctx, period, p["height_mm"] or PROBE_HEIGHT_MM)
        height = p["height_mm"] or _auto_height(ctx, medium, period, segments, design)
        # The table at the chosen height is the one the check asks for: built now, it is read from the cache then.
        design = _design(ctx, period, height)
    library = _library(ctx, medium, period, segments, height_mm=height, design=design)
    width = p["diameter_mm"] + 2 * p["flange_width_mm"]
    check_fits((width, width, p["base_thickness_mm"] + height), ctx.volumes, "graded-index plate")
    layout, stats = assign_cells(xy, library, medium, p["focal_length_mm"])
    if p["cell"] == "pillar":
        _check_slenderness(layout, height, segments, ctx.printer)
    solid = _plate_solid(p, layout, segments, height)
    ctx = replace(ctx, params={**p, "period_mm": period, "height_mm": height,
                               "max_freq_ghz": p["max_freq_ghz"] or p["freq_ghz"]})
    derived = {
        "period_mm": period, "period_limit_mm": limit, "period_rule": rule, "height_mm": height,
        "cells": len(layout.x_mm), "circular_segments": segments, "effective_medium_model": DEFAULT_MODEL,
        **library.limits_mm, **stats, "cell_model": _model_summary(design, layout, library),
        "focus_height_mm": p["base_thickness_mm"] + height + p["focal_length_mm"],
    }
    return finish(ctx, solid, medium, derived, focal_length_mm=p["focal_length_mm"], cells=layout)


def _check_slenderness(layout: CellLayout, height_mm: float, segments: int, printer) -> None:
    """Refuse pillars taller, for their width across the flats, than the printer's aspect-ratio blocker."""
    limit = ((printer.rule("aspect_ratio") or {}).get("blocker") if printer is not None else None)
    used = layout.diameter_mm[layout.diameter_mm > 0]
    if limit is None or not len(used):
        return
    width = float(used.min() * equal_area_radius(1.0, segments) * np.cos(np.pi / segments))
    if height_mm / width > limit:
        raise UnusableInput("pillars_too_slender", (
            f"The {height_mm:g} mm tall pillars this plate needs are as thin as {width:.3g} mm across, a height "
            f"{height_mm / width:.0f} times their width, above {printer.name}'s limit of {limit:g}; try holes "
            "instead of pillars, a higher frequency (shorter pillars), or a printer with a finer feature."))


def _design(ctx: Context, period: float, height_mm: float) -> Design:
    """Return the check's cell model for this plate at the design frequency, as the check will ask for it."""
    p = ctx.params
    rf = rf_values(ctx.material, [p["freq_ghz"]])
    params = {**p, "period_mm": period, "height_mm": height_mm}
    index, why = declared_cell_index(params, rf, period, terms=TABLE_TERMS)
    return Design(index, why, complex(index.eps[0]))


def _model_summary(design: Design, layout: CellLayout, library: Library) -> dict:
    """Return which model designed the cells (how many cells each), why, and the table's identity."""
    kinds, counts = np.unique(layout.designed_by.astype(str), return_counts=True)
    summary = design.index.to_dict() | {"why": design.why, "cells_by_model": dict(zip(kinds.tolist(), counts.tolist())),
                                        "phase_error_against": "the same model the check uses for these cells"}
    if "table" in summary:  # built or read: not part of what was designed, so equal inputs give equal parameters
        summary["table"] = {k: v for k, v in summary["table"].items() if k != "source"}
    span = _interval_span(library)
    if span < 2 * np.pi:
        summary["phase_span_note"] = (
            f"The cells this printer can make reach {np.degrees(span):.0f} of 360 deg of delay at this height; "
            "cells that need the rest take the nearest delay they can reach (counted as clipped); a taller "
            "height (leave it empty to have one chosen) covers the full circle.")
    return summary


def _period(ctx: Context) -> tuple[Medium, float, float, str]:
    """Return the design medium, the period, the no-diffraction limit at the highest frequency and how the
    period was chosen."""
    p = ctx.params
    medium = medium_at(ctx.material, p["freq_ghz"])
    f_top = p["max_freq_ghz"] or p["freq_ghz"]
    if f_top < p["freq_ghz"]:
        raise UnusableInput("bad_parameter", f"The highest frequency ({f_top:g} GHz) must not lie below the design frequency "
                            f"({p['freq_ghz']:g} GHz).")
    top = medium_at(ctx.material, f_top)
    limit = float(no_diffraction_period_mm(top.wavelength_mm, top.n, p["lattice"]))
    if p["period_mm"]:
        period, rule = p["period_mm"], "given"
    else:
        period, rule = default_period_mm(ctx, limit, f_top)
    if period >= limit:
        raise UnusableInput("period_too_large", f"A period of {period:g} mm lets diffraction orders propagate at "
                            f"{f_top:g} GHz: a {p['lattice']} lattice in {ctx.material.name} (n = {top.n:.4f}) "
                            f"needs a period below {limit:.4f} mm.")
    if len(lattice_points(p["diameter_mm"] / 2, period, p["lattice"])) > MAX_CELLS:
        raise UnusableInput("too_many_cells", f"A {p['diameter_mm']:g} mm plate at a {period:g} mm period has more "
                            f"than {MAX_CELLS:,} cells; make the plate smaller or the period larger.")
    return medium, period, limit, rule


def default_period_mm(ctx: Context, limit_mm: float, f_top_ghz: float) -> tuple[float, str]:
    """Return the default period (p n / lambda = 0.5 at the highest frequency, on whole microns) and the rule,
    or refuse when the printer cannot make cells that fine, naming the nearest way out."""
    cell = ctx.params["cell"]
    accurate = largest_micron_below(ACCURATE_PERIOD_FRACTION * limit_mm)
    smallest = smallest_cell_period_mm(cell, ctx.printer, segments_for(accurate / 2))
    if smallest <= accurate:
        printer = f"; the printer makes cells down to a {smallest:.3g} mm period" if ctx.printer is not None else ""
        return accurate, (f"p n / lambda = {ACCURATE_PERIOD_FRACTION:g} at {f_top_ghz:g} GHz, where the cell "
                          f"models are accurate{printer}")
    f_alt = int(np.floor(f_top_ghz * accurate / smallest))
    way_out = (f"give a period of up to {largest_micron_below(limit_mm):g} mm yourself (the check then predicts it "
               "with a rigorous table, less surely as the period nears that diffraction limit)"
               if smallest < limit_mm else "choose the other cell kind")
    raise UnusableInput("period_conflict", (
        f"At {f_top_ghz:g} GHz a {ctx.params['lattice']} lattice in {ctx.material.name} is accurate up to a "
        f"{accurate:g} mm period (p n / lambda = {ACCURATE_PERIOD_FRACTION:g}), but {ctx.printer.name} needs at "
        f"least {smallest:.3g} mm for its {cell}s ({_limits_in_words(cell, *cell_limits_mm(cell, ctx.printer))}); "
        f"design for {f_alt} GHz or less (where the two meet; lower still gives the cells room to vary), "
        f"choose a finer printer, or {way_out}."))


def cell_limits_mm(cell: str, printer) -> tuple[float, float]:
    """Return the smallest cell and the smallest solid or void between cells the printer allows (0 where not set).

    Pillars: the smallest (supported) feature, and the smallest XY gap between them. Holes: the
    smallest hole along z (or the gap, if larger), and the smallest feature for the walls between.
    """
    feature = (printer.rule("min_feature") or {}).get("supported_mm") or 0.0
    gap = (printer.rule("min_gap") or {}).get("xy_mm") or 0.0
    if cell == "pillar":
        return feature, gap
    return max(gap, (printer.rule("min_hole") or {}).get("along_z_mm") or 0.0), feature


def _limits_in_words(cell: str, smallest_cell_mm: float, between_mm: float) -> str:
    if cell == "pillar":
        return f"{smallest_cell_mm:g} mm smallest feature, {between_mm:g} mm smallest gap"
    return f"{smallest_cell_mm:g} mm smallest hole, {between_mm:g} mm smallest wall"


def smallest_cell_period_mm(cell: str, printer, segments: int) -> float:
    """Return the smallest period at which the printer can make any pillar or hole (0 without a printer):
    the smallest cell across its flats plus the smallest spacing between corners (``size_limits_mm``)."""
    if printer is None:
        return 0.0
    smallest, between = cell_limits_mm(cell, printer)
    return float(np.ceil(round((smallest / np.cos(np.pi / segments) + between) * 1000, 6)) / 1000)


def lattice_points(radius_mm: float, period_mm: float, lattice: str) -> np.ndarray:
    """Return (k, 2) cell centres of a square or hexagonal lattice whose cells lie inside the aperture."""
    row = period_mm * (np.sqrt(3.0) / 2.0 if lattice == "hex" else 1.0)
    nx, ny = int(radius_mm / period_mm) + 1, int(radius_mm / row) + 1
    i, j = np.meshgrid(np.arange(-nx, nx + 1), np.arange(-ny, ny + 1))
    shift = (j % 2) / 2.0 if lattice == "hex" else 0.0
    xy = np.column_stack([((i + shift) * period_mm).ravel(), (j * row).ravel()])
    return xy[np.hypot(xy[:, 0], xy[:, 1]) + period_mm / 2 <= radius_mm + 1e-9]


def size_limits_mm(period_mm: float, cell: str, printer, segments: int) -> tuple[float, float, dict]:
    """Return the (smallest, largest) makeable diameter and the printer's limits behind them.

    A pillar is at least the smallest feature across its flats and leaves the smallest gap between
    neighbours' corners; a hole is at least the smallest hole (or gap) across and leaves walls of
    the smallest feature. Diameters are those of the round cell the equal-area polygon stands for.
    """
    margin = smallest = between = GEOMETRIC_MARGIN * period_mm
    if printer is not None:
        smallest, between = (max(margin, v) for v in cell_limits_mm(cell, printer))
    corner = float(equal_area_radius(1.0, segments))
    lo, hi = smallest / (corner * np.cos(np.pi / segments)), (period_mm - between) / corner
    if lo > hi:
        raise UnusableInput("cells_unprintable", f"At a {period_mm:g} mm period no {cell} fits the printer: its "
                            f"{_limits_in_words(cell, smallest, between)} need a period of at least "
                            f"{np.ceil(round((lo * corner + between) * 1000, 6)) / 1000:g} mm; lower the frequency or "
                            "choose a finer printer.")
    names = ("min_feature_mm", "min_gap_mm") if cell == "pillar" else ("min_hole_mm", "min_wall_mm")
    return lo, hi, dict(zip(names, (smallest, between)))


def _library(ctx: Context, medium: Medium, period: float, segments: int, *, height_mm: float,
             design: Design) -> Library:
    """Return the cell library on a fine grid of diameters, none to touching, by the design's cell model."""
    p = ctx.params
    lo, hi, printer_limits = size_limits_mm(period, p["cell"], ctx.printer, segments)
    diameter = np.linspace(0.0, period / float(equal_area_radius(1.0, segments)), GRID)
    fill = material_fill(diameter, period, p["lattice"], p["cell"])
    s21 = cell_s21(fill, index=design.index, eps=design.eps, height_mm=height_mm, base_mm=p["base_thickness_mm"],
                   freq_ghz=medium.freq_ghz)
    allowed = (diameter == 0) | ((diameter >= lo) & (diameter <= hi))
    limits = {"diameter_min_mm": lo, "diameter_max_mm": hi, **printer_limits}
    return Library(diameter, fill, s21, allowed, limits, design.index.model_of(fill))


def _auto_height(ctx: Context, medium: Medium, period: float, segments: int, design: Design) -> float:
    """Return the height at which the makeable range of sizes spans a full 2 pi of delay (on the layer grid)."""
    height = PROBE_HEIGHT_MM
    library = _library(ctx, medium, period, segments, height_mm=height, design=design)
    for _ in range(6):
        span = _interval_span(library)
        if span >= 2 * np.pi and height == _on_layers(height, ctx.printer):
            break
        height = _on_layers(height * 2.04 * np.pi / span, ctx.printer) if span > 0 else np.inf
        if height > MAX_AUTO_HEIGHT_WAVELENGTHS * medium.wavelength_mm:
            raise UnusableInput("cells_span_too_little", f"The {ctx.params['cell']}s this printer can make at a "
                                f"{period:g} mm period span so little phase that a full 2 pi needs more than "
                                f"{min(height, MAX_AUTO_HEIGHT_WAVELENGTHS * medium.wavelength_mm):.3g} mm of "
                                f"height; {'try holes instead of pillars, ' if ctx.params['cell'] == 'pillar' else ''}"
                                "choose a finer printer or a larger period, or give the height yourself.")
        library = _library(ctx, medium, period, segments, height_mm=height, design=design)
    return height


def _interval_span(library: Library) -> float:
    """Return the delay spanned by the makeable sizes from smallest to largest (no pillar or hole left out)."""
    delay = library.delay_rad[library.allowed & (library.diameter_mm > 0)]
    return float(delay.max() - delay.min()) if len(delay) else 0.0


def phase_coverage(delay_rad: np.ndarray) -> float:
    """Return the fraction of the 2 pi circle the delays reach: 1 minus the largest gap between them."""
    d = np.sort(np.asarray(delay_rad) % (2 * np.pi))
    gaps = np.diff(np.append(d, d[0] + 2 * np.pi))
    return float(1.0 - gaps.max() / (2 * np.pi))


def _on_layers(height_mm: float, printer) -> float:
    """Return the height rounded up to whole print layers (to 1 um without a printer)."""
    layer = printer.layer_height_mm if printer is not None else 0.001
    return round(float(np.ceil(round(height_mm / layer, 6)) * layer), 9)


def assign_cells(xy: np.ndarray, library: Library, medium: Medium, f_mm: float) -> tuple[CellLayout, dict]:
    """Return each cell's size, chosen to match the lens delay modulo 2 pi, and the error statistics."""
    k0 = 2 * np.pi / medium.wavelength_mm
    want = (-k0 * thin_lens_path_mm(np.hypot(xy[:, 0], xy[:, 1]), f_mm)) % (2 * np.pi)
    have = library.delay_rad % (2 * np.pi)
    want = (want + _best_offset(want, have[library.allowed])) % (2 * np.pi)
    chosen = _nearest(want, have, library.allowed)
    ideal = _nearest(want, have, np.ones_like(library.allowed))
    layout = CellLayout(xy[:, 0], xy[:, 1], library.diameter_mm[chosen], library.fill[chosen], want, have[chosen],
                        ~library.allowed[ideal], library.model[chosen])
    error, error_ideal = layout.phase_error_rad, wrap_pi(have[ideal] - want)
    stats = {
        "cells_clipped": int(layout.clipped.sum()), "phase_rms_error_rad": _rms(error),
        "phase_rms_error_ideal_rad": _rms(error_ideal), "phase_max_error_rad": float(np.abs(error).max()),
        "phase_coverage": phase_coverage(library.delay_rad[library.allowed]),
        "fill_min": float(layout.fill.min()), "fill_max": float(layout.fill.max()),
        "mean_transmittance": float(np.mean(np.abs(library.s21[chosen]) ** 2)),
    }
    return layout, stats


def _best_offset(want: np.ndarray, have: np.ndarray, bins: int = 720, offsets: int = 72) -> float:
    """Return the global phase offset that minimises the RMS error over the cells.

    Only the wrapped target matters, so the best error of each of ``bins`` target values is
    tabulated once and looked up for every offset.
    """
    taus = np.arange(bins) * (2 * np.pi / bins)
    table = np.abs(wrap_pi(have[None, :] - taus[:, None])).min(axis=1)
    trial = np.arange(offsets) * (2 * np.pi / offsets)
    index = np.rint(((want[None, :] + trial[:, None]) % (2 * np.pi)) / (2 * np.pi / bins)).astype(int) % bins
    return float(trial[np.argmin((table[index] ** 2).mean(axis=1))])


def _nearest(want: np.ndarray, have: np.ndarray, allowed: np.ndarray, chunk: int = 4096) -> np.ndarray:
    """Return, for each wanted delay, the index of the allowed library entry nearest to it modulo 2 pi."""
    candidates = np.flatnonzero(allowed)
    out = np.empty(len(want), dtype=np.int64)
    for start in range(0, len(want), chunk):
        error = np.abs(wrap_pi(have[candidates][None, :] - want[start:start + chunk, None]))
        out[start:start + chunk] = candidates[np.argmin(error, axis=1)]
    return out


def _rms(values: np.ndarray) -> float:
    return float(np.sqrt(np.mean(np.square(values)))) if len(values) else 0.0


def _plate_solid(p: dict, layout: CellLayout, segments: int, height: float) -> m3d.Manifold:
    """Return the base with its pillars, or the slab with its holes."""
    radius, base = p["diameter_mm"] / 2 + p["flange_width_mm"], p["base_thickness_mm"]
    keep = layout.diameter_mm > 0
    section = _circles(layout.x_mm[keep], layout.y_mm[keep], layout.diameter_mm[keep] / 2, segments)
    if p["cell"] == "pillar":
        # Pillars start inside the base so the union meets no coincident faces.
        sink = min(0.1, base / 2)
        pillars = checked(m3d.Manifold.extrude(section, height + sink).translate((0.0, 0.0, base - sink)), "pillars")
        return union([disc(radius, base, "base"), pillars], "graded-index plate")
    below = 0.0 if base > 0 else 0.5
    holes = checked(m3d.Manifold.extrude(section, height + 1.0 + below).translate((0.0, 0.0, base - below)), "holes")
    return subtract(disc(radius, base + height, "slab"), holes, "graded-index plate")


def _circles(x: np.ndarray, y: np.ndarray, r: np.ndarray, segments: int) -> m3d.CrossSection:
    """Return equal-area polygons for every circle, as one cross-section."""
    angle = np.arange(segments) * (2 * np.pi / segments)
    corner = equal_area_radius(r, segments)[:, None]
    rings = np.stack([x[:, None] + corner * np.cos(angle), y[:, None] + corner * np.sin(angle)], axis=-1)
    return m3d.CrossSection(list(rings))
