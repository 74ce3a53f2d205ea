"""Time the design-rule checks on the reference parts, each case in a fresh process.

    .venv/bin/python benchmarks/make_reference_parts.py   # once (writes benchmarks/parts/)
    .venv/bin/python benchmarks/bench_rules.py             # all cases, a table at the end
    .venv/bin/python benchmarks/bench_rules.py --case zoned_lens_60mm --px 0.025 --dz 0.025 [--floor]

Each case reads the STL as a raw triangle soup, builds the layer stack (timed alone), then runs every
rule family on the starter printer ``bay1-lcd-resin`` (its limits; the grid is the case's), timed
alone. Peak memory is the process's maximum resident set size. Pillar-count scaling uses plates
built here with the reference plate's recipe at pitches giving about 500, 2,000 and 8,000 pillars.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_layers import read_stl_soup  # noqa: E402
from make_reference_parts import PARTS_DIR, checked, write_stl  # noqa: E402, F401 (write_stl: used by the child)

from services import catalogue  # noqa: E402
from services.layers import build_layer_stack  # noqa: E402
from services.part import Part  # noqa: E402
from services.rules import raster, run_rules  # noqa: E402

CASES = (("pillar_plate_30mm", 0.025, 0.025), ("zoned_lens_60mm", 0.025, 0.025),
         ("pillar_plate_30mm", 0.05, 0.05), ("zoned_lens_60mm", 0.05, 0.05))
SCALING = {"pillars_500": 1.2, "pillars_2000": 0.6, "pillars_8000": 0.3}  # name -> pitch (mm)
DENSE = {"pillars_10000": 0.257}  # 10,005 pillars, the thinnest 1.75 px across at 50 um (issue 14's crash)
REFERENCE_PITCH_MM = 0.47


def peak_rss_mb() -> float:
    """Return this process's peak resident memory (VmHWM starts afresh at exec; ru_maxrss does not)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024.0
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def part_from(path: Path) -> Part:
    tris = read_stl_soup(path)
    return Part(
        name=path.stem, sha256="bench", source_format="stl", units="mm",
        vertices_mm=tris.reshape(-1, 3).astype(np.float64),
        faces=np.arange(3 * len(tris), dtype=np.int64).reshape(-1, 3), bodies=1, watertight=True,
    )


FLOOR_REACH_PX = 30  # the floor's window: each run's material box grown by this many pixels


def rules_floor_s(stack) -> tuple[float, float]:
    """Return (wall, CPU) seconds of the rules' floor (issue 14): per run of identical layers, one OpenCV distance
    transform and two labellings (8-connected solid, 4-connected void) in the run's window, the material's box
    grown by ``FLOOR_REACH_PX``. The unpacking of the runs is not counted."""
    import cv2

    wall = cpu = 0.0
    for _, _, mask in stack.runs():
        box = raster.bbox(mask)
        if box is None:
            continue
        r0, r1, c0, c1 = box
        m = FLOOR_REACH_PX
        crop = np.zeros((r1 - r0 + 2 * m, c1 - c0 + 2 * m), np.uint8)
        crop[m:-m, m:-m] = mask[r0:r1, c0:c1]
        void = 1 - crop
        start, c = time.perf_counter(), time.process_time()
        cv2.distanceTransform(crop, cv2.DIST_L2, 5)
        cv2.connectedComponentsWithAlgorithm(crop, 8, cv2.CV_32S, cv2.CCL_BOLELLI)  # 32-bit: OpenCV's parallel path,
        cv2.connectedComponentsWithAlgorithm(void, 4, cv2.CV_32S, cv2.CCL_SAUF)     # 0.5 s less wall on the 2M lens
        wall, cpu = wall + time.perf_counter() - start, cpu + time.process_time() - c
    return wall, cpu


def run_case(name: str, px: float, dz: float, floor: bool = False) -> dict:
    """Build the stack, run the rules (and with ``floor`` their floor, after them), return timings, memory and what
    was found."""
    part = part_from(PARTS_DIR / f"{name}.stl")
    start = time.perf_counter()
    stack = build_layer_stack(part, pixel_mm=px, layer_height_mm=dz)
    stack_s = time.perf_counter() - start
    printer = replace(catalogue.printer("bay1-lcd-resin"), pixel_mm=px, layer_height_mm=dz)
    start, cpu = time.perf_counter(), time.process_time()
    rules = run_rules(stack=stack, part=part, printer=printer)
    rules_s, rules_cpu_s = time.perf_counter() - start, time.process_time() - cpu
    extra = {}
    if floor:
        floor_s, floor_cpu_s = rules_floor_s(stack)
        extra = {"floor_s": round(floor_s, 3), "floor_cpu_s": round(floor_cpu_s, 3),
                 "rules_over_floor": round(rules_s / floor_s, 2), "cpu_over_floor_cpu": round(rules_cpu_s / floor_cpu_s, 2)}
    return {**extra, 
        "case": name, "px_mm": px, "dz_mm": dz, "layers": stack.count, "distinct": stack.distinct_count,
        "grid": list(stack.shape), "stack_s": round(stack_s, 3), "rules_s": round(rules_s, 3),
        "rules_cpu_s": round(rules_cpu_s, 3), "load": round(os.getloadavg()[0], 1),
        "ratio": round(rules_s / stack_s, 2), "peak_rss_mb": round(peak_rss_mb()),
        "findings": [f"{f.rule}:{f.severity}x{f.count}" for f in rules.findings],
        "support_mm3": rules.summary.get("overhang", {}).get("support_volume_mm3"),
    }


def scaled_pillar_plate(pitch_mm: float):
    """Return the reference pillar plate's recipe at another pitch, radii scaled with the pitch.

    (30 mm, 1 mm plate; pillar radius 0.18 -> 0.08 mm x pitch / 0.47 mm and height 3 -> 1 mm from the
    centre out; each pillar starts 0.1 mm inside the plate.)
    """
    from manifold3d import Manifold, OpType

    reach, scale = 14.5, pitch_mm / REFERENCE_PITCH_MM
    n = int(reach // pitch_mm)
    xs, ys = np.meshgrid(np.arange(-n, n + 1) * pitch_mm, np.arange(-n, n + 1) * pitch_mm)
    rho = np.hypot(xs, ys).ravel()
    inside = rho <= reach
    xs, ys, rho = xs.ravel()[inside], ys.ravel()[inside], rho[inside]
    radius = (0.18 - 0.10 * (rho / reach) ** 2) * scale
    height = 3.0 - 2.0 * rho / reach
    pillars = [Manifold.cylinder(h + 0.1, r, circular_segments=32).translate((x, y, 0.9))
               for x, y, r, h in zip(xs, ys, radius, height)]
    print(f"  {len(pillars)} pillars", flush=True)
    plate = Manifold.cylinder(1.0, 15.0, circular_segments=256)
    return checked(Manifold.batch_boolean([plate] + pillars, OpType.Add))


def ensure_scaling_parts() -> None:
    """Build the scaling plates in a child process, so this one's peak memory stays its own."""
    for name, pitch in {**SCALING, **DENSE}.items():
        path = PARTS_DIR / f"{name}.stl"
        if not path.exists():
            print(f"building {name}", flush=True)
            code = (f"import sys; sys.argv=['x']; sys.path.insert(0, {str(ROOT / 'benchmarks')!r}); "
                    f"import bench_rules as b; from pathlib import Path; "
                    f"b.write_stl(b.scaled_pillar_plate({pitch}), Path({str(path)!r}))")
            subprocess.run([sys.executable, "-c", code], check=True)


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--case")
    parser.add_argument("--px", type=float, default=0.025)
    parser.add_argument("--dz", type=float, default=0.025)
    parser.add_argument("--out", default=str(ROOT / "benchmarks" / "results_rules.json"))
    parser.add_argument("--floor", action="store_true", help="with --case: time the rules' floor after them, in the "
                                                              "same process")
    args = parser.parse_args(argv)
    if args.case:
        print(json.dumps(run_case(args.case, args.px, args.dz, args.floor)))
        return 0
    ensure_scaling_parts()
    cases = list(CASES) + [(name, 0.025, 0.025) for name in SCALING] + [(name, 0.05, 0.05) for name in DENSE]
    results = []
    for name, px, dz in cases:
        out = subprocess.run([sys.executable, __file__, "--case", name, "--px", str(px), "--dz", str(dz)],
                             capture_output=True, text=True, check=True)
        results.append(json.loads(out.stdout.strip().splitlines()[-1]))
        r = results[-1]
        print(f"{name:22s} {px * 1000:.0f}/{dz * 1000:.0f} um  layers {r['layers']:4d} ({r['distinct']:3d})  "
              f"stack {r['stack_s']:6.2f} s  rules {r['rules_s']:6.2f} s (cpu {r['rules_cpu_s']:.1f})  x{r['ratio']:.1f}  "
              f"load {r['load']}  "
              f"{r['peak_rss_mb']:5d} MB  {' '.join(r['findings'])}", flush=True)
    Path(args.out).write_text(json.dumps(results, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
