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
from services.components.solid import CHORD_TOL_MM, check_fits, checked, from_arrays, segments_for
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
    smallest = smallest_printable_mm(ctx.printer)
    if smallest > 0:
        solid = clamped_solid(phi, z, radius, base, total, smallest, ctx.printer.layer_height_mm)
    else:
        solid = azimuthal_solid(phi, z, radius, "spiral phase plate")
    if charge < 0:
        solid = checked(solid.mirror((0.0, 1.0, 0.0)), "spiral phase plate")
    solid = add_flange_ring(solid, radius, p)
    derived = {
        "total_step_mm": total, "full_wave_step_mm": medium.full_wave_step_mm,
        "step_height_mm": total / steps if steps else None, "max_thickness_mm": float(z.max()),
        "handedness": "counter-clockwise" if charge > 0 else "clockwise",
        "core_radius_mm": core_radius_mm(smallest, radius),
        "clamped_within_mm": clamped_within_mm(smallest, total, ctx.printer.layer_height_mm) if smallest > 0 else 0.0,
    }
    return finish(ctx, solid, medium, derived, focal_length_mm=None)


def clamped_solid(phi: np.ndarray, z: np.ndarray, radius: float, base: float, total: float, smallest: float,
                  layer_mm: float) -> m3d.Manifold:
    """Return the plate with the ramp's height over its base held between a(r) and total - a(r), a(r) = s total /
    (2 pi r) with s the printer's smallest wall or gap.

    Each layer of a spiral is a sector: the layer at height z over the base is void over the azimuths where the
    ramp is lower, 2 pi z / total radians of a continuous ramp (at least that many of a stepped one), and solid
    over the rest. Near the axis the narrow one (the void low down, the solid high up) is narrower than the
    printer can make: r 2 pi z / total < s. Holding the height at or above a(r) fills the void sectors where they
    are narrower than s, and at or below total - a(r) removes the solid ones; every sector left is at least s
    wide. Only the wedges' tips change, so the beam keeps its charge near the axis: a solid pin over every
    radius where one layer's sector is too narrow (3.3 mm on a 30 mm plate for 150 GHz on a 50 um printer) put
    a tenth of a 10 dB-tapered beam's power in charge 0 (tests/services/optics/test_vortex.py).

    The top is a height field on rings about the axis (the azimuths of ``phi``, the heights of ``z`` clamped on
    each ring), closed to the axis by a fan from half the rise inside the core's radius; rings run out to
    where a(r) falls to half a layer (past it no layer's mid-plane sees the clamp), then the rim.
    """
    core = core_radius_mm(smallest, radius)
    reach = smallest * total / (2 * np.pi)          # a(r) = reach / r
    last = min(2 * clamped_within_mm(smallest, total, layer_mm), radius)  # a(r) half a layer
    count = max(2, int(np.ceil(np.log(last / core) / np.log(1 + CLAMP_RING_STEP)))) if last > core else 1
    rings = np.geomspace(core, last, count) if last > core else np.array([core])
    if rings[-1] < radius:
        rings = np.append(rings, radius)
    rise = np.minimum(reach / rings, total / 2)
    rise[rings > last] = 0.0  # the rim, past the last ring: the ramp itself
    h = z - base
    heights = base + np.clip(h[None, :], rise[:, None], total - rise[:, None])   # (rings, samples)
    s, k = len(phi), len(rings)
    xy = rings[:, None, None] * np.stack([np.cos(phi), np.sin(phi)], axis=-1)[None]   # (rings, samples, 2)
    top = np.concatenate([xy, heights[..., None]], axis=-1).reshape(-1, 3)
    rim = np.column_stack([radius * np.cos(phi), radius * np.sin(phi), np.zeros(s)])
    vertices = np.vstack([top, rim, [[0.0, 0.0, base + total / 2], [0.0, 0.0, 0.0]]])
    bot, apex, centre = k * s, k * s + s, k * s + s + 1
    i = np.arange(s)
    j = (i + 1) % s
    at = lambda ring, sample: ring * s + sample  # noqa: E731
    faces = [np.column_stack([np.full(s, apex), at(0, i), at(0, j)])]            # the core's fan
    for ring in range(k - 1):                                                      # ring to ring
        faces += [np.column_stack([at(ring, i), at(ring + 1, i), at(ring + 1, j)]),
                  np.column_stack([at(ring, i), at(ring + 1, j), at(ring, j)])]
    outer = k - 1
    faces += [np.column_stack([bot + i, bot + j, at(outer, j)]),                   # the rim
              np.column_stack([bot + i, at(outer, j), at(outer, i)]),
              np.column_stack([np.full(s, centre), bot + j, bot + i])]              # the bottom
    return from_arrays(vertices, np.vstack(faces), "spiral phase plate")


CLAMP_RING_STEP = 0.1  # each ring 10 % wider than the one inside it: a(r) = reach / r followed within 0.25 % of
# itself between two rings (a line across r..qr misses 1 / r by at most (q - 1)^2 / 4 of it)


def core_radius_mm(smallest_mm: float, radius_mm: float) -> float:
    """Return the radius of the clamp's innermost ring, where half a turn's sector is two smallest walls wide
    (r pi = 2 s; a(r) is a quarter of the rise there), at most half the plate's (0 without a printer). Inside it
    the top is a fan to half the rise on the axis: under 0.1 % of a 10 dB-tapered beam 28 mm across falls
    inside it on a 50 um resin printer."""
    return float(min(2 * smallest_mm / np.pi, radius_mm / 2))


def clamped_within_mm(smallest_mm: float, total_mm: float, layer_mm: float) -> float:
    """Return the radius out to which the clamp moves the ramp by at least one layer: a(r) = layer."""
    return float(smallest_mm * total_mm / (2 * np.pi * layer_mm))


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
