"""Spiral phase plates: thickness rising with azimuth by l lambda / (n - 1) over one turn.

h(phi) = l lambda phi / (2 pi (n - 1)) (Beijersbergen et al., Opt. Commun. 112, 321, 1994;
optics notes section 8), continuous or in N flat steps, on a solid base.
"""

from __future__ import annotations

import math

import manifold3d as m3d
import numpy as np

from services.components.base import Component, Context, finish, smallest_printable_mm
from services.components.formulas import medium_at
from services.components.multilevel import add_flange_ring
from services.components.solid import CHORD_TOL_MM, check_fits, checked, disc, from_arrays, segments_for, union
from services.errors import UnusableInput

# Each step's wall leans by this much at the rim, so every rim vertex has an angle of its own
# and no edge carries another vertex in its middle; far below any printer's pixel.
WALL_LEAN_MM = 0.001


def build_spiral(ctx: Context) -> Component:
    """Return the spiral phase plate of charge l, continuous or stepped."""
    p = ctx.params
    charge, steps, radius, base = p["charge"], p["steps"], p["diameter_mm"] / 2, p["base_thickness_mm"]
    if charge == 0:
        raise UnusableInput("bad_parameter", "A topological charge of 0 is a flat plate; choose a charge of 1 or more "
                            "(or a negative one for the other handedness).")
    if steps == 1:
        raise UnusableInput("bad_parameter", "steps must be 0 (a continuous ramp) or at least 2.")
    medium = medium_at(ctx.material, p["freq_ghz"])
    total = abs(charge) * medium.full_wave_step_mm
    width = p["diameter_mm"] + 2 * p["flange_width_mm"]
    check_fits((width, width, base + total), ctx.volumes, "spiral phase plate")
    phi, z = spiral_samples(radius, base, total, steps)
    solid = azimuthal_solid(phi, z, radius, "spiral phase plate")
    centre = centre_fill_radius_mm(ctx.printer, total, steps, radius)
    if centre > 0:
        solid = union([solid, disc(centre, base + total, "spiral centre")], "spiral phase plate")
    if charge < 0:
        solid = checked(solid.mirror((0.0, 1.0, 0.0)), "spiral phase plate")
    solid = add_flange_ring(solid, radius, p)
    derived = {
        "total_step_mm": total, "full_wave_step_mm": medium.full_wave_step_mm,
        "step_height_mm": total / steps if steps else None, "max_thickness_mm": float(z.max()),
        "handedness": "counter-clockwise" if charge > 0 else "clockwise",
        "centre_fill_radius_mm": centre,
    }
    return finish(ctx, solid, medium, derived, focal_length_mm=None)


def centre_fill_radius_mm(printer, total_mm: float, steps: int, radius_mm: float) -> float:
    """Return the radius of the solid pin filling the plate's centre so that this printer can make it (0: none).

    Each layer of a spiral is a sector; near the axis its narrowest sector (one step, 2 pi / N, or for a
    continuous ramp one layer's rise, 2 pi dz / total) is narrower than any printer can make, as solid
    (the top layers) and as void (the bottom ones). Inside the radius where that sector is as wide as the
    printer's smallest wall or gap, the plate is made solid to its full height: the vortex's dark core is
    there, so the beam barely sees it (the report's vortex section measures what it costs).
    """
    smallest = smallest_printable_mm(printer)
    if smallest <= 0:
        return 0.0
    angle = 2 * np.pi / steps if steps else 2 * np.pi * printer.layer_height_mm / total_mm
    return float(min(smallest / angle, radius_mm / 4))


def spiral_samples(radius: float, base: float, total: float, steps: int) -> tuple[np.ndarray, np.ndarray]:
    """Return azimuths in [0, 2 pi) and the top height at each, rising counter-clockwise from phi = 0."""
    lean = WALL_LEAN_MM / radius
    rim = segments_for(radius)
    if steps == 0:
        # Enough samples that the fan's error near the axis (one sample's rise) stays under the tolerance.
        count = max(rim, math.ceil(total / CHORD_TOL_MM))
        phi = np.append(np.arange(count) * (2 * np.pi / count), 2 * np.pi - lean)
        return phi, base + total * phi / (2 * np.pi)
    per_step = max(2, math.ceil(rim / steps) + 1)
    phis, zs = [], []
    for k in range(steps):
        start, end = 2 * np.pi * k / steps, 2 * np.pi * (k + 1) / steps - lean
        phis.append(np.linspace(start, end, per_step))
        zs.append(np.full(per_step, base + total * k / steps))
    return np.concatenate(phis), np.concatenate(zs)


def azimuthal_solid(phi: np.ndarray, z: np.ndarray, radius: float, what: str) -> m3d.Manifold:
    """Return the disc whose top height depends on azimuth alone, linear between samples.

    phi : (s,) strictly increasing in [0, 2 pi); z : (s,) top height at each, wrapping from the
    last sample back to the first. The top is a fan from the axis; where the height changes, a
    vertical sliver joins the axis to the rim, and the axis carries one vertex per height.
    """
    s = len(phi)
    levels, level_of = np.unique(z, return_inverse=True)
    rim = np.column_stack([radius * np.cos(phi), radius * np.sin(phi)])
    vertices = np.vstack([np.column_stack([rim, z]), np.column_stack([rim, np.zeros(s)]), [[0.0, 0.0, 0.0]],
                          np.column_stack([np.zeros((len(levels), 2)), levels])])
    top, bot, centre, axis = 0, s, 2 * s, 2 * s + 1
    i = np.arange(s)
    j = (i + 1) % s
    faces = [
        np.column_stack([axis + level_of[i], top + i, top + j]),  # top fan
        np.column_stack([bot + i, bot + j, top + j]),            # rim
        np.column_stack([bot + i, top + j, top + i]),
        np.column_stack([np.full(s, centre), bot + j, bot + i]),  # bottom
        _slivers(level_of, top, axis),
    ]
    return from_arrays(vertices, np.vstack(faces), what)


def _slivers(level_of: np.ndarray, top: int, axis: int) -> np.ndarray:
    """Return the fans that close each height change between the rim vertex and the axis."""
    s = len(level_of)
    rows = []
    for i in np.flatnonzero(level_of != np.roll(level_of, -1)):
        j = (i + 1) % s
        a, b = level_of[i], level_of[j]
        chain = np.arange(a, b + 1) if b > a else np.arange(a, b - 1, -1)
        rows.append(np.column_stack([np.full(len(chain) - 1, top + j), axis + chain[1:], axis + chain[:-1]]))
    return np.vstack(rows) if rows else np.zeros((0, 3), dtype=np.int64)
