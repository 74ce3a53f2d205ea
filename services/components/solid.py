"""manifold3d behind one gate: every result's status is checked, and solids become Parts.

manifold3d reports failure as a status on an empty result, not as an exception; an unchecked
empty solid would read as a part with nothing wrong with it, so every call goes through
``checked``.
"""

from __future__ import annotations

import math
from itertools import permutations

import manifold3d as m3d
import numpy as np

from services.errors import UnusableInput
from services.intake import part_from_arrays
from services.part import Part

# Largest distance between a true circle or profile curve and its facets: well below a 25 um
# printer pixel, so the facets never show in the layer stack (common practice).
CHORD_TOL_MM = 0.005
SIMPLIFY_TOL_MM = 0.001


def checked(solid: m3d.Manifold, what: str) -> m3d.Manifold:
    """Return the solid, or raise UnusableInput when manifold3d reports a status or an empty result."""
    status = solid.status()
    if status != m3d.Error.NoError:
        raise UnusableInput("geometry_failed", f"The {what} could not be built as a closed solid (the geometry "
                            f"kernel reports {status.name}); try other parameters.")
    if solid.is_empty() or solid.volume() <= 0:
        raise UnusableInput("geometry_failed", f"The {what} came out empty; check that its sizes leave some material.")
    return solid


def segments_for(radius_mm: float, *, tol_mm: float = CHORD_TOL_MM, minimum: int = 12) -> int:
    """Return a segment count (multiple of 4) whose chord sagitta R (1 - cos(pi/N)) stays under tol."""
    if radius_mm <= tol_mm:
        return minimum
    n = math.pi / math.acos(1.0 - tol_mm / radius_mm)
    return max(minimum, 4 * math.ceil(n / 4))


def equal_area_radius(radius_mm, segments: int):
    """Return the circumradius of an N-gon with the area of the circle (so fill fractions stay exact)."""
    return radius_mm * np.sqrt(2 * np.pi / (segments * np.sin(2 * np.pi / segments)))


def revolve_profile(r_mm: np.ndarray, z_mm: np.ndarray, segments: int, what: str) -> m3d.Manifold:
    """Revolve the region under a top boundary about z.

    r_mm, z_mm : the top boundary from the outer rim inwards to the axis (r = 0); a repeated r is a
    vertical step. The region closes along z = 0.
    """
    top = np.column_stack([r_mm, z_mm])
    poly = np.vstack([[0.0, 0.0], [r_mm[0], 0.0], top])
    section = m3d.CrossSection([poly])
    return checked(m3d.Manifold.revolve(section, circular_segments=segments), what)


def extrude_xz_profile(x_mm: np.ndarray, z_mm: np.ndarray, length_mm: float, what: str) -> m3d.Manifold:
    """Extrude the region under a top boundary z(x) (x increasing) along y, centred on y = 0."""
    poly = np.vstack([[x_mm[0], 0.0], [x_mm[-1], 0.0], np.column_stack([x_mm, z_mm])[::-1]])
    section = m3d.CrossSection([poly])
    # Rotating +90 deg about x turns the section's y (height) into z and the extrusion into -y.
    prism = m3d.Manifold.extrude(section, length_mm).rotate((90.0, 0.0, 0.0)).translate((0.0, length_mm / 2, 0.0))
    return checked(prism, what)


def disc(radius_mm: float, height_mm: float, what: str, *, z0_mm: float = 0.0) -> m3d.Manifold:
    """Return a faceted cylinder standing on z0."""
    solid = m3d.Manifold.cylinder(height_mm, radius_mm, circular_segments=segments_for(radius_mm))
    return checked(solid.translate((0.0, 0.0, z0_mm)), what)


def union(solids: list[m3d.Manifold], what: str) -> m3d.Manifold:
    """Return the union of the solids (one batch boolean)."""
    return checked(m3d.Manifold.batch_boolean(solids, m3d.OpType.Add), what)


def intersect(a: m3d.Manifold, b: m3d.Manifold, what: str) -> m3d.Manifold:
    """Return the intersection of two solids."""
    return checked(m3d.Manifold.batch_boolean([a, b], m3d.OpType.Intersect), what)


def subtract(a: m3d.Manifold, b: m3d.Manifold, what: str) -> m3d.Manifold:
    """Return a minus b."""
    return checked(m3d.Manifold.batch_boolean([a, b], m3d.OpType.Subtract), what)


def from_arrays(vertices_mm: np.ndarray, faces: np.ndarray, what: str) -> m3d.Manifold:
    """Return a solid from a triangle mesh the caller built (merged vertices, outward winding)."""
    mesh = m3d.Mesh64(vert_properties=np.ascontiguousarray(vertices_mm, np.float64),
                      tri_verts=np.ascontiguousarray(faces, np.uint64))
    return checked(m3d.Manifold(mesh), what)


def to_part(solid: m3d.Manifold, *, name: str, parameters: dict) -> Part:
    """Return the checked solid as a generated Part carrying its parameters."""
    # Booleans can leave needle triangles of zero area where vertices of neighbouring features happen
    # to line up; intake would drop them and then find the surface open. Simplifying within a few um
    # flips them away without moving any surface by more than that (far below a 25 um pixel); the
    # tolerance grows only when the finer one left a needle.
    for tol_mm in (SIMPLIFY_TOL_MM, 4 * SIMPLIFY_TOL_MM, 16 * SIMPLIFY_TOL_MM):
        mesh = checked(solid.simplify(tol_mm), "part").to_mesh64()
        vertices = np.asarray(mesh.vert_properties, dtype=np.float64)[:, :3]
        faces = np.asarray(mesh.tri_verts, dtype=np.int64)
        part = part_from_arrays(vertices, faces, name=name, source_format="generated", parameters=parameters)
        if part.watertight and not part.findings:
            return part
    found = "; ".join(f.message for f in part.findings) or "the surface is not closed"
    raise UnusableInput("geometry_failed", f"The generated part failed the mesh examination ({found}); "
                        "try slightly different parameters.")


def check_fits(size_mm: tuple[float, float, float], volumes: list[tuple[float, float, float]] | None, what: str) -> None:
    """Raise UnusableInput when the part fits no build volume in any axis-aligned orientation."""
    if not volumes:
        return
    for box in volumes:
        if any(all(s <= b + 1e-9 for s, b in zip(turned, box)) for turned in permutations(size_mm)):
            return
    sizes = " x ".join(f"{s:.1f}" for s in size_mm)
    largest = max(volumes, key=lambda b: b[0] * b[1] * b[2])
    raise UnusableInput("too_large", f"The {what} measures {sizes} mm and fits no build volume (the largest is "
                        f"{' x '.join(f'{b:g}' for b in largest)} mm); make it smaller or choose a larger printer.")
