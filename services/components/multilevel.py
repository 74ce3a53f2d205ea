"""N-level phase plates: a quantised thin lens, or a quantised linear ramp that deflects a beam.

The continuous profile wraps every 2 pi (one full-wave step lambda / (n - 1)) and is cut into N
flat levels of height lambda / (N (n - 1)); the flat back lies on z = 0.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from services.components.base import Component, Context, finish, smallest_printable_mm
from services.components.formulas import Medium, check_f_number, medium_at, path_radius_mm
from services.components.lens import with_flange
from services.components.solid import (
    CHORD_TOL_MM, check_fits, disc, extrude_xz_profile, intersect, revolve_profile, segments_for, subtract, union,
)


def build_multilevel(ctx: Context) -> Component:
    """Return the N-level lens or deflector."""
    p = ctx.params
    medium = medium_at(ctx.material, p["freq_ghz"])
    levels, step = p["levels"], medium.full_wave_step_mm / p["levels"]
    width = p["diameter_mm"] + 2 * p["flange_width_mm"]
    top = p["base_thickness_mm"] + (levels - 1) * step
    height = max(top, p["flange_thickness_mm"]) if p["flange_width_mm"] > 0 else top
    if p["profile"] == "lens":
        check_f_number(p["focal_length_mm"], p["diameter_mm"], "phase plate")
        check_fits((width, width, height), ctx.volumes, "phase plate")
        solid, derived = _lens(p, medium, smallest_printable_mm(ctx.printer))
        ctx = replace(ctx, params={**p, "deflection_deg": None})
    else:
        check_fits((width, width, height), ctx.volumes, "phase plate")
        solid, derived = _deflector(p, medium)
        ctx = replace(ctx, params={**p, "focal_length_mm": None})
    derived |= {
        "levels": levels, "step_height_mm": step, "full_wave_height_mm": medium.full_wave_step_mm,
        "level_heights_mm": [p["base_thickness_mm"] + k * step for k in range(levels)],
        # Ideal first-order efficiency of an N-level blaze: sinc^2(1/N) (Swanson 1989; optics notes section 5).
        "efficiency_ideal": float(np.sinc(1.0 / levels) ** 2),
    }
    return finish(ctx, solid, medium, derived, focal_length_mm=ctx.params["focal_length_mm"])


def _lens(p: dict, medium: Medium, smallest_mm: float = 0.0):
    """Return the revolved N-level lens and its ring radii; rings narrower than ``smallest_mm`` are merged."""
    radius, f, levels = p["diameter_mm"] / 2, p["focal_length_mm"], p["levels"]
    lam, step = medium.wavelength_mm, medium.full_wave_step_mm / levels
    # Ring j spans paths [j, j + 1) lambda / N; its level counts down from N - 1 at each zone's start.
    count = int(np.floor((np.hypot(radius, f) - f) / (lam / levels))) + 1
    edges = np.minimum(path_radius_mm(np.arange(count + 1) * lam / levels, f), radius)
    heights = p["base_thickness_mm"] + (levels - 1 - np.arange(count) % levels) * step
    edges, heights, merged = printable_rings(edges, heights, smallest_mm)
    r = np.repeat(edges[::-1], 2)[1:-1]
    z = np.repeat(heights[::-1], 2)
    keep = np.r_[True, (np.diff(r) != 0) | (np.diff(z) != 0)]
    r, z = with_flange(r[keep], z[keep], p)
    solid = revolve_profile(r, z, segments_for(r[0]), "phase plate")
    rings = [float(v) for v in edges[1:] if v < radius]
    derived = {"ring_radii_mm": rings, "zone_radii_mm": rings[levels - 1::levels],
               "focus_height_mm": float(z[-1]) + f, "rings_merged_for_printer": merged}
    return solid, derived


def printable_rings(edges: np.ndarray, heights: np.ndarray, smallest_mm: float) -> tuple[np.ndarray, np.ndarray, int]:
    """Return (edges, heights, merged): rings narrower than the printer's smallest wall or gap joined to the ring
    inside them, which keeps its height.

    A ring's level differs from its inner neighbour's by one step (modulo a full wave, also across a zone
    boundary), so a joined ring's phase is off by one step, 2 pi / N, over its width: the printer could
    not have made it anyway (a ridge below the minimum feature or a groove below the minimum gap).
    """
    if smallest_mm <= 0:
        return edges, heights, 0
    keep_edges, keep_heights = [edges[0]], []
    for k in range(len(heights)):
        if keep_heights and edges[k + 1] - keep_edges[-1] < smallest_mm:
            keep_edges[-1] = edges[k + 1]  # this ring joins the one inside it
            continue
        keep_edges.append(edges[k + 1])
        keep_heights.append(heights[k])
    # Join a narrow last ring too (its width was measured before the merge above could widen it).
    while len(keep_heights) > 1 and keep_edges[-1] - keep_edges[-2] < smallest_mm:
        keep_edges.pop(-2)
        keep_heights.pop()
    return np.asarray(keep_edges), np.asarray(keep_heights), len(heights) - len(keep_heights)


def _deflector(p: dict, medium: Medium):
    """Return the N-level blazed grating, cut to the round aperture, thicker towards +x."""
    radius, levels = p["diameter_mm"] / 2, p["levels"]
    period = medium.wavelength_mm / np.sin(np.radians(p["deflection_deg"]))
    step = medium.full_wave_step_mm / levels
    width = period / levels
    q = np.arange(int(np.floor(-radius / width)), int(np.ceil(radius / width)))
    x0, x1 = np.maximum(q * width, -radius - 1), np.minimum((q + 1) * width, radius + 1)
    heights = p["base_thickness_mm"] + (q % levels) * step
    x = np.column_stack([x0, x1]).ravel()
    z = np.repeat(heights, 2)
    prism = extrude_xz_profile(x, z, 2 * radius + 2, "phase plate")
    solid = intersect(prism, disc(radius, float(z.max()) + 1, "phase plate aperture"), "phase plate")
    solid = add_flange_ring(solid, radius, p)
    derived = {"grating_period_mm": float(period), "level_width_mm": float(width)}
    return solid, derived


def add_flange_ring(solid, radius: float, p: dict):
    """Return the solid with a flat flange ring from the aperture's rim outwards.

    The ring reaches 2 chord tolerances inside the rim, past the facets of the part's own rim,
    so the union meets no coincident faces (which leave slivers); where the flange is the thicker,
    that overlap shows as a ledge narrower than the tolerance.
    """
    if p["flange_width_mm"] <= 0:
        return solid
    t = p["flange_thickness_mm"]
    outer = disc(radius + p["flange_width_mm"], t, "flange")
    ring = subtract(outer, disc(radius - 2 * CHORD_TOL_MM, t + 2, "flange", z0_mm=-1.0), "flange")
    return union([solid, ring], "part with its flange")
