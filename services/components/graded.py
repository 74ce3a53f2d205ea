"""Graded-index plates: a flat plate of subwavelength pillars or holes whose local delay is a lens.

Each cell's size is chosen so that its delay (from ``cells``: effective medium + transfer matrix)
matches the thin-lens phase (2 pi / lambda)(sqrt(r^2 + f^2) - f) modulo 2 pi (optics notes
section 8), within the sizes the printer can make; the phase error that costs is reported.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import manifold3d as m3d
import numpy as np

from services.components.base import CellLayout, Component, Context, finish, wrap_pi
from services.components.cells import cell_transmission, delay_rad, material_fill
from services.components.formulas import (
    Medium, check_f_number, largest_micron_below, medium_at, no_diffraction_period_mm, thin_lens_path_mm,
)
from services.components.solid import check_fits, checked, disc, equal_area_radius, segments_for, subtract, union
from services.errors import UnusableInput
from services.optics.effective_medium import DEFAULT_MODEL

MAX_CELLS = 50_000
GRID = 1024  # cell sizes tried between none and touching: steps of 0.1 % of the period
# Without a printer, neighbours stay 2 % of a period apart and no wall or pillar is thinner, so no
# two solids ever touch along an edge (engineering judgement).
GEOMETRIC_MARGIN = 0.02
# A default height above ten wavelengths means the printable cells span too little phase to be
# worth printing as a lens (engineering judgement).
MAX_AUTO_HEIGHT_WAVELENGTHS = 10.0


@dataclass(frozen=True, slots=True, eq=False)
class Library:
    """Cell sizes from none to touching, what each one does, and which ones the printer can make."""

    diameter_mm: np.ndarray
    fill: np.ndarray
    s21: np.ndarray
    allowed: np.ndarray
    limits_mm: dict

    @property
    def delay_rad(self) -> np.ndarray:
        return delay_rad(self.s21)


def build_graded_index(ctx: Context) -> Component:
    """Return the graded-index plate and its cell layout."""
    p = ctx.params
    check_f_number(p["focal_length_mm"], p["diameter_mm"], "graded-index plate")
    if p["cell"] == "pillar" and p["base_thickness_mm"] <= 0:
        raise UnusableInput("bad_parameter", "Pillars need a base to stand on: give base_thickness_mm above 0.")
    medium, period, limit = _period(ctx)
    segments = segments_for(period / 2)
    xy = lattice_points(p["diameter_mm"] / 2, period, p["lattice"])
    library = _library(ctx, medium, period, segments, height_mm=1.0)
    height = p["height_mm"] or _auto_height(ctx, medium, period, segments, library)
    library = _library(ctx, medium, period, segments, height_mm=height)
    width = p["diameter_mm"] + 2 * p["flange_width_mm"]
    check_fits((width, width, p["base_thickness_mm"] + height), ctx.volumes, "graded-index plate")
    layout, stats = assign_cells(xy, library, medium, p["focal_length_mm"])
    solid = _plate_solid(p, layout, segments, height)
    ctx = replace(ctx, params={**p, "period_mm": period, "height_mm": height,
                               "max_freq_ghz": p["max_freq_ghz"] or p["freq_ghz"]})
    derived = {
        "period_mm": period, "period_limit_mm": limit, "height_mm": height, "cells": len(layout.x_mm),
        "circular_segments": segments, "effective_medium_model": DEFAULT_MODEL, **library.limits_mm, **stats,
        "focus_height_mm": p["base_thickness_mm"] + height + p["focal_length_mm"],
    }
    return finish(ctx, solid, medium, derived, focal_length_mm=p["focal_length_mm"], cells=layout)


def _period(ctx: Context) -> tuple[Medium, float, float]:
    """Return the design medium, the period and the no-diffraction limit at the highest frequency."""
    p = ctx.params
    medium = medium_at(ctx.material, p["freq_ghz"])
    f_top = p["max_freq_ghz"] or p["freq_ghz"]
    if f_top < p["freq_ghz"]:
        raise UnusableInput("bad_parameter", f"max_freq_ghz ({f_top:g}) must not lie below the design frequency "
                            f"({p['freq_ghz']:g} GHz).")
    top = medium_at(ctx.material, f_top)
    limit = float(no_diffraction_period_mm(top.wavelength_mm, top.n, p["lattice"]))
    period = p["period_mm"] or largest_micron_below(limit)
    if period >= limit:
        raise UnusableInput("period_too_large", f"A period of {period:g} mm lets diffraction orders propagate at "
                            f"{f_top:g} GHz: a {p['lattice']} lattice in {ctx.material.name} (n = {top.n:.4f}) "
                            f"needs a period below {limit:.4f} mm.")
    if len(lattice_points(p["diameter_mm"] / 2, period, p["lattice"])) > MAX_CELLS:
        raise UnusableInput("too_many_cells", f"A {p['diameter_mm']:g} mm plate at a {period:g} mm period has more "
                            f"than {MAX_CELLS:,} cells; make the plate smaller or the period larger.")
    return medium, period, limit


def lattice_points(radius_mm: float, period_mm: float, lattice: str) -> np.ndarray:
    """Return (k, 2) cell centres of a square or hexagonal lattice whose cells lie inside the aperture."""
    row = period_mm * (np.sqrt(3.0) / 2.0 if lattice == "hex" else 1.0)
    nx, ny = int(radius_mm / period_mm) + 1, int(radius_mm / row) + 1
    i, j = np.meshgrid(np.arange(-nx, nx + 1), np.arange(-ny, ny + 1))
    shift = (j % 2) / 2.0 if lattice == "hex" else 0.0
    xy = np.column_stack([((i + shift) * period_mm).ravel(), (j * row).ravel()])
    return xy[np.hypot(xy[:, 0], xy[:, 1]) + period_mm / 2 <= radius_mm + 1e-9]


def size_limits_mm(period_mm: float, cell: str, printer, segments: int) -> tuple[float, float, float, float]:
    """Return (smallest, largest) makeable diameter and the feature and gap limits behind them.

    Pillars must be at least the smallest feature across their flats and leave the smallest gap
    between neighbours' corners; holes the other way round. Diameters are those of the round
    cell the equal-area polygon stands for.
    """
    feature = gap = GEOMETRIC_MARGIN * period_mm
    if printer is not None:
        feature = max(feature, (printer.rule("min_feature") or {}).get("supported_mm") or 0.0)
        gap = max(gap, (printer.rule("min_gap") or {}).get("xy_mm") or 0.0)
    corner = float(equal_area_radius(1.0, segments))
    flat = corner * np.cos(np.pi / segments)
    solid_min, void_min = (feature, gap) if cell == "pillar" else (gap, feature)
    lo, hi = solid_min / flat, (period_mm - void_min) / corner
    if lo > hi:
        raise UnusableInput("cells_unprintable", f"At a {period_mm:g} mm period no {cell} fits the printer: a "
                            f"{feature:g} mm smallest feature and a {gap:g} mm smallest gap need a period of at "
                            f"least {feature + gap:g} mm; lower the frequency or choose a finer printer.")
    return lo, hi, feature, gap


def _library(ctx: Context, medium: Medium, period: float, segments: int, *, height_mm: float) -> Library:
    """Return the cell library on a fine grid of diameters, none to touching."""
    p = ctx.params
    lo, hi, feature, gap = size_limits_mm(period, p["cell"], ctx.printer, segments)
    diameter = np.linspace(0.0, period / float(equal_area_radius(1.0, segments)), GRID)
    fill = material_fill(diameter, period, p["lattice"], p["cell"])
    s21 = cell_transmission(fill, eps_r=medium.eps_r, tan_delta=medium.tan_delta, height_mm=height_mm,
                            base_mm=p["base_thickness_mm"], freq_ghz=medium.freq_ghz)
    allowed = (diameter == 0) | ((diameter >= lo) & (diameter <= hi))
    limits = {"diameter_min_mm": lo, "diameter_max_mm": hi, "min_feature_mm": feature, "min_gap_mm": gap}
    return Library(diameter, fill, s21, allowed, limits)


def _auto_height(ctx: Context, medium: Medium, period: float, segments: int, library: Library) -> float:
    """Return the height at which the makeable range of sizes spans a full 2 pi of delay (on the layer grid)."""
    height = 1.0
    for _ in range(6):
        span = _interval_span(library)
        if span >= 2 * np.pi and height == _on_layers(height, ctx.printer):
            break
        height = _on_layers(height * 2.04 * np.pi / span, ctx.printer)
        if height > MAX_AUTO_HEIGHT_WAVELENGTHS * medium.wavelength_mm:
            raise UnusableInput("cells_span_too_little", f"The {ctx.params['cell']}s this printer can make at a "
                                f"{period:g} mm period span so little phase that a full 2 pi needs more than "
                                f"{height:.3g} mm of height; try holes instead of pillars, a finer printer, or "
                                "give height_mm.")
        library = _library(ctx, medium, period, segments, height_mm=height)
    return height


def _interval_span(library: Library) -> float:
    """Return the delay spanned by the makeable sizes from smallest to largest (no pillar or hole left out)."""
    delay = library.delay_rad[library.allowed & (library.diameter_mm > 0)]
    return float(delay.max() - delay.min())


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
                        ~library.allowed[ideal])
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
