"""Write the benchmark's reference parts as binary STL files into benchmarks/parts/.

    .venv/bin/python benchmarks/make_reference_parts.py [--only NAME ...]

Parts (all rest on z = 0, axis along +z):
  zoned_lens_60mm      60 mm zoned collimating lens for 140 GHz (n = 1.65, f = 72 mm), 2 mm base
  zoned_lens_100mm     the same recipe 100 mm across (more, narrower zones; 400 segments round)
  pillar_plate_30mm    30 mm plate, 1 mm thick, ~3,000 pillars (32 segments) graded in radius and height
  smooth_lens_2m       60 mm hyperbolic plano-convex lens revolved finely to ~2M triangles
  pillar_plate_30mm_seg16 / _seg64   the pillar plate with 16 / 64 segments (triangle scaling)
  sphere_60mm          a 60 mm ball: the worst case for storage (every layer distinct, 60 mm tall)
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import manifold3d
import numpy as np
import trimesh
from manifold3d import CrossSection, Manifold, OpType

PARTS_DIR = Path(__file__).resolve().parent / "parts"
C_MM_GHZ = 299.792458  # speed of light in mm * GHz

N_LENS = 1.65
FOCAL_MM = 72.0
FREQ_GHZ = 140.0
LENS_RADIUS_MM = 30.0
BASE_MM = 2.0


def checked(manifold: Manifold) -> Manifold:
    """Return the manifold, or stop when manifold3d reports an error status."""
    if manifold.status() != manifold3d.Error.NoError:
        raise SystemExit(f"manifold3d returned {manifold.status()}")
    return manifold


def hyperbolic_sag_mm(r_mm: np.ndarray) -> np.ndarray:
    """Return the sag of a plano-convex lens whose hyperbolic face looks at the focus.

    (n^2 - 1) z^2 + 2 (n - 1) f z = r^2 (Silver, Microwave Antenna Theory and Design, 1949, ch. 11;
    Goldsmith, Quasioptical Systems, 1998, ch. 5; from memory).
    """
    a, b = N_LENS**2 - 1, 2 * FOCAL_MM * (N_LENS - 1)
    return (-b + np.sqrt(b * b + 4 * a * r_mm**2)) / (2 * a)


def zone_radii_mm(depth_mm: float, radius_mm: float = LENS_RADIUS_MM) -> np.ndarray:
    """Return the radii where the sag reaches a multiple of the zone depth (the zone steps)."""
    a, b = N_LENS**2 - 1, 2 * FOCAL_MM * (N_LENS - 1)
    steps = np.arange(1, int(hyperbolic_sag_mm(np.array(radius_mm)) // depth_mm) + 1) * depth_mm
    return np.sqrt(a * steps**2 + b * steps)


def zoned_lens(points_per_zone: int = 120, segments: int = 256, radius_mm: float = LENS_RADIUS_MM) -> Manifold:
    """Return the zoned lens: thickness base + depth - (sag mod depth), depth = lambda / (n - 1)."""
    depth = C_MM_GHZ / FREQ_GHZ / (N_LENS - 1)
    edges = np.concatenate([[0.0], zone_radii_mm(depth, radius_mm), [radius_mm]])
    top = []
    for outer, inner in zip(edges[:0:-1], edges[-2::-1]):  # outside in, one zone at a time
        r = np.linspace(outer, inner, points_per_zone)
        sag = hyperbolic_sag_mm(r)
        k = np.floor(hyperbolic_sag_mm(np.array((outer + inner) / 2)) / depth)
        top += list(zip(r, BASE_MM + depth - (sag - k * depth)))
    outline = [(0.0, 0.0), (radius_mm, 0.0)] + top
    return checked(CrossSection([np.array(outline)]).revolve(segments))


def smooth_lens(points: int = 1000, segments: int = 1024) -> Manifold:
    """Return the unzoned hyperbolic plano-convex lens, revolved finely (~2 x points x segments triangles)."""
    r = np.linspace(LENS_RADIUS_MM, 0.0, points)
    top = BASE_MM + hyperbolic_sag_mm(np.array(LENS_RADIUS_MM)) - hyperbolic_sag_mm(r)
    outline = [(0.0, 0.0), (LENS_RADIUS_MM, 0.0)] + list(zip(r, top))
    return checked(CrossSection([np.array(outline)]).revolve(segments))


def pillar_plate(segments: int = 32, pitch_mm: float = 0.47) -> Manifold:
    """Return a 30 mm, 1 mm plate carrying a square lattice of pillars graded with radius.

    Pillar radius 0.18 -> 0.08 mm and height 3 -> 1 mm from centre to rim; each pillar starts 0.1 mm
    inside the plate so no faces are coplanar.
    """
    plate_r, reach = 15.0, 14.5
    n = int(reach // pitch_mm)
    xs, ys = np.meshgrid(np.arange(-n, n + 1) * pitch_mm, np.arange(-n, n + 1) * pitch_mm)
    rho = np.hypot(xs, ys).ravel()
    inside = rho <= reach
    xs, ys, rho = xs.ravel()[inside], ys.ravel()[inside], rho[inside]
    radius = 0.18 - 0.10 * (rho / reach) ** 2
    height = 3.0 - 2.0 * rho / reach
    plate = Manifold.cylinder(1.0, plate_r, circular_segments=256)
    pillars = [
        Manifold.cylinder(h + 0.1, r, circular_segments=segments).translate((x, y, 0.9))
        for x, y, r, h in zip(xs, ys, radius, height)
    ]
    print(f"  {len(pillars)} pillars", flush=True)
    return checked(Manifold.batch_boolean([plate] + pillars, OpType.Add))


def write_stl(manifold: Manifold, path: Path) -> None:
    mesh = manifold.to_mesh()
    vertices = np.asarray(mesh.vert_properties, dtype=np.float64)[:, :3]
    faces = np.asarray(mesh.tri_verts, dtype=np.int64)
    trimesh.Trimesh(vertices, faces, process=False).export(path)
    print(f"  {path.name}: {len(faces):,} triangles, volume {manifold.volume():.1f} mm3", flush=True)


BUILDERS = {
    "zoned_lens_60mm": zoned_lens,
    "zoned_lens_100mm": lambda: zoned_lens(segments=400, radius_mm=50.0),
    "pillar_plate_30mm": pillar_plate,
    "smooth_lens_2m": smooth_lens,
    "pillar_plate_30mm_seg16": lambda: pillar_plate(segments=16),
    "pillar_plate_30mm_seg64": lambda: pillar_plate(segments=64),
    "sphere_60mm": lambda: checked(Manifold.sphere(30.0, circular_segments=256).translate((0.0, 0.0, 30.0))),
}


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--only", nargs="*", choices=sorted(BUILDERS), help="build only these parts")
    args = parser.parse_args(argv)
    PARTS_DIR.mkdir(exist_ok=True)
    for name in args.only or BUILDERS:
        start = time.perf_counter()
        print(f"{name}:", flush=True)
        write_stl(BUILDERS[name](), PARTS_DIR / f"{name}.stl")
        print(f"  built in {time.perf_counter() - start:.1f} s", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
