"""Time intake + layer stack on the reference parts, each case in a fresh process.

    .venv/bin/python benchmarks/make_reference_parts.py   # once
    .venv/bin/python benchmarks/bench_layers.py            # all cases 3 times, a table at the end
    .venv/bin/python benchmarks/bench_layers.py --case pillar_plate_30mm --px 0.025 --dz 0.025 --mode stack

Modes: ``stack`` reads the STL as a raw triangle soup with numpy, merges its corners as intake does (not
timed), makes a Part, orients it and builds the layer stack; ``manifold`` reads the same soup, merges it into a manifold3d Manifold and
slices every layer's mid-plane (``Manifold.slice`` + ``to_polygons``): the slice-only baseline;
``floor`` is issue 14's floor for slicing: the same manifold3d slices, each filled into a raster of the stack's
frame with OpenCV's ``fillPoly`` (outer contours and holes in one call), timed without the manifold's load.
Peak memory is the process's maximum resident set size (resource.getrusage).
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from services.intake.merge import _merge_vertices  # noqa: E402
from services.layers import build_layer_stack, orient_part  # noqa: E402
from services.part import Part  # noqa: E402

PARTS_DIR = ROOT / "benchmarks" / "parts"
STL_RECORD = np.dtype([("normal", "<f4", 3), ("v", "<f4", (3, 3)), ("attr", "<u2")])
GRIDS = ((0.05, 0.05), (0.025, 0.025))
MAIN_PARTS = ("zoned_lens_60mm", "pillar_plate_30mm", "smooth_lens_2m")
WORST_CASE = ("sphere_60mm", 0.025, 0.025)  # every layer distinct over 60 mm: the storage worst case
SCALING = (  # triangles: the plate at 16 / 32 / 64 segments; layers: 100 / 50 / 25 um at a 50 um pixel
    ("pillar_plate_30mm_seg16", 0.05, 0.05), ("pillar_plate_30mm_seg64", 0.05, 0.05),
    ("pillar_plate_30mm", 0.05, 0.1), ("pillar_plate_30mm", 0.05, 0.025),
)


def read_stl_soup(path: Path) -> np.ndarray:
    """Return the (T, 3, 3) float32 triangles of a binary STL file."""
    with open(path, "rb") as fh:
        fh.seek(80)
        count = int(np.frombuffer(fh.read(4), "<u4")[0])
        return np.fromfile(fh, dtype=STL_RECORD, count=count)["v"]


def peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def run_stack(path: Path, px: float, dz: float, warm: bool = False) -> dict:
    start = time.perf_counter()
    tris = read_stl_soup(path)
    # Merged as intake merges them (the slicer is given the part intake made), not timed: the floor's
    # manifold3d merge is not timed either.
    vertices, faces = _merge_vertices(np.ascontiguousarray(tris.reshape(-1, 3)),
                                      np.arange(3 * len(tris), dtype=np.int64).reshape(-1, 3))
    part = Part(name=path.stem, sha256="bench", source_format="stl", units="mm", vertices_mm=vertices,
                faces=faces, bodies=1, watertight=True)
    part = orient_part(part, "+z")
    if warm:  # as a worker child slices every part after its first: its pools, canvas pages and imports in use
        build_layer_stack(part, pixel_mm=px, layer_height_mm=dz)
    read_s = time.perf_counter() - start
    stack = build_layer_stack(part, pixel_mm=px, layer_height_mm=dz)
    total_s = time.perf_counter() - start
    return {
        "triangles": len(tris), "layers": stack.count, "distinct": stack.distinct_count,
        "grid": list(stack.shape), "volume_mm3": round(stack.volume_mm3, 2), "read_s": round(read_s, 3),
        "stack_s": round(total_s - read_s, 3), "total_s": round(total_s, 3),
        "store_mb": round(stack.nbytes / 2**20, 1),
    }


def run_manifold(path: Path, px: float, dz: float, warm: bool = False) -> dict:
    import manifold3d

    start = time.perf_counter()
    tris = read_stl_soup(path)
    mesh = manifold3d.Mesh(
        vert_properties=np.ascontiguousarray(tris.reshape(-1, 3)),
        tri_verts=np.arange(3 * len(tris), dtype=np.uint32).reshape(-1, 3),
    )
    mesh.merge()
    solid = manifold3d.Manifold(mesh)
    if solid.status() != manifold3d.Error.NoError:
        raise SystemExit(f"{path.name}: manifold3d returned {solid.status()}")
    load_s = time.perf_counter() - start
    z_top = float(tris[:, :, 2].max())
    heights = (np.arange(max(1, int(np.ceil(z_top / dz - 0.5)))) + 0.5) * dz
    start = time.perf_counter()
    area = sum(solid.slice(float(h)).area() for h in heights)
    slice_s = time.perf_counter() - start
    return {
        "triangles": len(tris), "layers": len(heights), "volume_mm3": round(area * dz, 2),
        "load_s": round(load_s, 3), "slice_s": round(slice_s, 3),
    }


def run_floor(path: Path, px: float, dz: float, warm: bool = False) -> dict:
    """Slice with manifold3d and fill each layer's polygons into a pixel raster (cv2.fillPoly): the floor
    (``warm``: every layer sliced and filled once before the timed pass)."""
    import cv2
    import manifold3d

    tris = read_stl_soup(path)
    mesh = manifold3d.Mesh(vert_properties=np.ascontiguousarray(tris.reshape(-1, 3)),
                           tri_verts=np.arange(3 * len(tris), dtype=np.uint32).reshape(-1, 3))
    mesh.merge()
    solid = manifold3d.Manifold(mesh)
    lo, hi = tris.reshape(-1, 3).min(axis=0), tris.reshape(-1, 3).max(axis=0)
    x0, y0 = np.floor(lo[:2] / px) * px - 2 * px
    nx, ny = (int(np.ceil((hi[i] - (x0, y0)[i]) / px)) + 2 for i in (0, 1))
    heights = (np.arange(max(1, int(np.ceil(float(hi[2] - lo[2]) / dz - 0.5)))) + 0.5) * dz + float(lo[2])
    shift = 8  # fillPoly's fixed-point fraction bits: contours placed to 1/256 pixel
    for h in heights if warm else ():
        polygons = solid.slice(float(h)).to_polygons()
        if polygons:
            cv2.fillPoly(np.zeros((ny, nx), np.uint8), [np.rint(((p - (x0, y0)) / px - 0.5) * 256).astype(np.int32)
                                                        for p in polygons], 1, lineType=cv2.LINE_8, shift=8)
    floor_s, solid_px = 0.0, 0
    for h in heights:
        start = time.perf_counter()
        polygons = solid.slice(float(h)).to_polygons()
        raster = np.zeros((ny, nx), np.uint8)
        if polygons:
            pts = [np.rint(((p - (x0, y0)) / px - 0.5) * (1 << shift)).astype(np.int32) for p in polygons]
            cv2.fillPoly(raster, pts, 1, lineType=cv2.LINE_8, shift=shift)
        floor_s += time.perf_counter() - start
        solid_px += int(np.count_nonzero(raster))  # the volume check, not timed: not part of the floor
    return {"triangles": len(tris), "layers": len(heights), "grid": [ny, nx],
            "volume_mm3": round(solid_px * px * px * dz, 2), "load_s": 0.0, "slice_s": round(floor_s, 3)}


def one_case(args: argparse.Namespace) -> int:
    path = PARTS_DIR / f"{args.case}.stl"
    if not path.exists():
        raise SystemExit(f"{path} is missing: run benchmarks/make_reference_parts.py first")
    result = {"stack": run_stack, "manifold": run_manifold, "floor": run_floor}[args.mode](path, args.px, args.dz,
                                                                                           args.warm)
    result.update(case=args.case, px_mm=args.px, dz_mm=args.dz, mode=args.mode, warm=args.warm,
                  peak_rss_mb=round(peak_rss_mb()))
    print(json.dumps(result))
    return 0


def fresh(case: str, px: float, dz: float, mode: str) -> dict:
    cmd = [sys.executable, __file__, "--case", case, "--px", str(px), "--dz", str(dz), "--mode", mode]
    out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
    result = json.loads(out.strip().splitlines()[-1])
    print(json.dumps(result), flush=True)
    return result


def all_cases(repeat: int) -> int:
    cases = [(c, px, dz, m) for c in MAIN_PARTS for px, dz in GRIDS for m in ("stack", "manifold")]
    cases += [(c, px, dz, "stack") for c, px, dz in SCALING + (WORST_CASE,)]
    results = [fresh(*case) for _ in range(repeat) for case in cases]
    out = ROOT / "benchmarks" / "results_layers.json"
    out.write_text(json.dumps(results, indent=1) + "\n")
    print(f"wrote {out}\n")
    print_table(results)
    return 0


def print_table(results: list[dict]) -> None:
    """Print one markdown row per case: medians (and the range of the timed step) over the repeats."""
    groups: dict[tuple, list[dict]] = {}
    for r in results:
        groups.setdefault((r["case"], r["px_mm"], r["dz_mm"], r["mode"]), []).append(r)
    print("| part | px / dz (um) | mode | triangles | layers (distinct) | read s | stack or slice s: median (range) "
          "| total s | peak RSS MB | store MB |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for (case, px, dz, mode), runs in groups.items():
        first, key = ("read_s", "stack_s") if mode == "stack" else ("load_s", "slice_s")
        t = sorted(r[key] for r in runs)
        layers = f"{runs[0]['layers']} ({runs[0]['distinct']})" if mode == "stack" else str(runs[0]["layers"])
        print(f"| {case} | {px * 1000:g} / {dz * 1000:g} | {mode} | {runs[0]['triangles']:,} | {layers} | "
              f"{median(r[first] for r in runs):.2f} | {t[len(t) // 2]:.2f} ({t[0]:.2f}-{t[-1]:.2f}) | "
              f"{median(r[first] + r[key] for r in runs):.2f} | {max(r['peak_rss_mb'] for r in runs)} | "
              f"{runs[0].get('store_mb', '')} |")


def median(values) -> float:
    v = sorted(values)
    return v[len(v) // 2]


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--case")
    parser.add_argument("--px", type=float, default=0.05)
    parser.add_argument("--dz", type=float, default=0.05)
    parser.add_argument("--mode", choices=("stack", "manifold", "floor"), default="stack")
    parser.add_argument("--warm", action="store_true", help="with --case: time a second slicing in the process")
    parser.add_argument("--repeat", type=int, default=3, help="fresh runs per case (all cases only)")
    parser.add_argument("--table", action="store_true", help="print the table of the last saved results")
    args = parser.parse_args(argv)
    if args.table:
        print_table(json.loads((ROOT / "benchmarks" / "results_layers.json").read_text()))
        return 0
    return one_case(args) if args.case else all_cases(args.repeat)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
