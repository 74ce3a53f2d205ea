"""Dielectric lenses of revolution: the plano-hyperbolic lens and its zoned (stepped) version.

The flat face lies on z = 0 (the print bed) and the shaped face looks up at the focus, which
sits ``focal_length_mm`` above the lens's highest point. A wave from the focus leaves the flat
face as a plane wave.
"""

from __future__ import annotations

import numpy as np

from services.components.base import Component, Context, finish
from services.components.formulas import (
    Medium, check_f_number, hyperbolic_sag_mm, medium_at, path_radius_mm, profile_step_mm, radial_samples,
)
from services.components.solid import CHORD_TOL_MM, check_fits, revolve_profile, segments_for
from services.errors import UnusableInput


def build_plano_convex(ctx: Context) -> Component:
    """Return the plano-hyperbolic lens: hyperbolic face over a flat back, optional flange."""
    p = ctx.params
    radius, f = p["diameter_mm"] / 2, p["focal_length_mm"]
    check_f_number(f, p["diameter_mm"], "lens")
    medium = medium_at(ctx.material, p["freq_ghz"])
    n = medium.n
    sag_rim = float(hyperbolic_sag_mm(radius, f, n))
    centre = p["base_thickness_mm"] + sag_rim
    check_fits(_envelope(p, centre), ctx.volumes, "lens")
    # The hyperbola bends most at its vertex, radius of curvature (n - 1) f.
    r = radial_samples(radius, 0.0, profile_step_mm((n - 1) * f, CHORD_TOL_MM))
    z = centre - hyperbolic_sag_mm(r, f, n)
    r, z = with_flange(r, z, p)
    solid = revolve_profile(r, z, segments_for(r[0]), "plano-convex lens")
    derived = {
        "centre_thickness_mm": centre, "edge_thickness_mm": p["base_thickness_mm"], "sag_mm": sag_rim,
        "f_number": f / p["diameter_mm"], "rim_half_angle_deg": float(np.degrees(np.arctan2(radius, f + sag_rim))),
        "focus_height_mm": centre + f,
    }
    return finish(ctx, solid, medium, derived, focal_length_mm=f)


def build_zoned(ctx: Context) -> Component:
    """Return the zoned lens: each zone an exact hyperbola, reset by one wavelength of path."""
    p = ctx.params
    radius, f, t_min = p["diameter_mm"] / 2, p["focal_length_mm"], p["min_thickness_mm"]
    check_f_number(f, p["diameter_mm"], "lens")
    medium = medium_at(ctx.material, p["freq_ghz"])
    step = medium.full_wave_step_mm
    radii = zone_radii_mm(f, medium, radius)
    _check_zone_foci(f, step, len(radii))
    check_fits(_envelope(p, t_min + step), ctx.volumes, "zoned lens")
    r, z, walls = _zoned_profile(radius, f, t_min, medium, radii)
    r, z = with_flange(r, z, p)
    solid = revolve_profile(r, z, segments_for(r[0]), "zoned lens")
    derived = {
        "step_height_mm": step, "zone_radii_mm": radii, "zones": len(radii) + 1, "wall_heights_mm": walls,
        "max_thickness_mm": t_min + step, "f_number": f / p["diameter_mm"], "focus_height_mm": t_min + step + f,
    }
    return finish(ctx, solid, medium, derived, focal_length_mm=f)


def zone_radii_mm(f_mm: float, medium: Medium, radius_mm: float) -> list[float]:
    """Return the radii of the zone steps inside the aperture.

    Every step foot lies on the plane z = t_min, a distance F = f + lambda / (n - 1) from the
    focus; a step falls where the path to that plane has grown by m wavelengths:
    r_m = sqrt(2 m lambda F + (m lambda)^2) (zone-plate radii, optics notes section 8).
    """
    plane = f_mm + medium.full_wave_step_mm
    radii, m = [], 1
    while (r := float(path_radius_mm(m * medium.wavelength_mm, plane))) < radius_mm * (1 - 1e-9):
        radii.append(r)
        m += 1
    return radii


def _zoned_profile(radius: float, f: float, t_min: float, medium: Medium, radii: list[float]):
    """Return the top boundary (outer rim inwards) and the height of each zone step's wall.

    Zone m is the hyperbola of focal length f - m lambda / (n - 1) about the same focus, raised
    by m steps: T_m(y) = t_min + (m + 1) step - sag(y; f - m step). Rays inside the lens run
    parallel to the axis, so each zone's path to the flat face differs by exactly m wavelengths.
    """
    n, step = medium.n, medium.full_wave_step_mm
    edges = [0.0, *radii, radius]
    rs, zs, walls = [], [], []
    for m in range(len(edges) - 2, -1, -1):
        f_m = f - m * step
        r = radial_samples(edges[m + 1], edges[m], profile_step_mm((n - 1) * f_m, CHORD_TOL_MM))
        z = t_min + (m + 1) * step - hyperbolic_sag_mm(r, f_m, n)
        rs.append(r)
        zs.append(z)
        if m > 0:
            walls.append(float(z[-1] - t_min))
    return np.concatenate(rs), np.concatenate(zs), walls[::-1]


def _check_zone_foci(f: float, step: float, steps: int) -> None:
    if f - steps * step <= 0:
        raise UnusableInput("focal_length_too_short", f"With {steps} zone steps of {step:.3g} mm the outer zones "
                            f"would need a negative focal length; use a focal length above {steps * step:.3g} mm "
                            "or a smaller diameter.")


def with_flange(r: np.ndarray, z: np.ndarray, p: dict) -> tuple[np.ndarray, np.ndarray]:
    """Prefix a flat flange ring to a top boundary that starts at the aperture's rim."""
    width = p.get("flange_width_mm") or 0.0
    if width <= 0:
        return r, z
    outer, t = r[0] + width, p["flange_thickness_mm"]
    return np.concatenate([[outer, r[0]], r]), np.concatenate([[t, t], z])


def _envelope(p: dict, height: float) -> tuple[float, float, float]:
    size = p["diameter_mm"] + 2 * (p.get("flange_width_mm") or 0.0)
    if (p.get("flange_width_mm") or 0.0) > 0:
        height = max(height, p["flange_thickness_mm"])
    return (size, size, height)
