"""Time the parametric generator on the two demo parts that stress it, in this process.

    .venv/bin/python benchmarks/bench_components.py [--runs 3] [--material standard-resin]

* the 60 mm zoned collimating lens, f = 72 mm, 140 GHz (a revolved profile of three exact zones);
* a 30 mm graded-index pillar plate for 300 GHz at a 0.48 mm period, about 3,000 cells (one batch
  union of all pillars with the base), no printer limits.

Set PHASEWRIGHT_CELL_TABLE_DIR to a fresh folder to time the plate's first build with its rigorous cell
table (the later runs read it). Each run is a full ``build_component`` (geometry, manifold3d checks, intake's mesh examination) plus
a binary STL export. Prints one JSON line per part, to paste into benchmarks/README.md ("Components").
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from services import catalogue  # noqa: E402
from services.components import build_component, export_mesh  # noqa: E402

PARTS = {
    "zoned_lens_60mm": ("zoned", {"diameter_mm": 60.0, "focal_length_mm": 72.0, "freq_ghz": 140.0}),
    "graded_plate_30mm": ("graded-index", {"diameter_mm": 30.0, "focal_length_mm": 30.0, "freq_ghz": 300.0,
                                           "period_mm": 0.48}),
}


def time_part(kind: str, params: dict, material, runs: int) -> dict:
    """Return the build and export times of each run and what was built."""
    builds, exports = [], []
    for _ in range(runs):
        t0 = time.perf_counter()
        component = build_component(kind, params, material=material)
        t1 = time.perf_counter()
        export_mesh(component.part, "stl")
        builds.append(round(t1 - t0, 3))
        exports.append(round(time.perf_counter() - t1, 3))
    derived = component.derived
    return {
        "kind": kind, "build_s": builds, "stl_export_s": exports, "triangles": len(component.part.faces),
        "volume_mm3": round(component.part.volume_mm3, 2), "cells": derived.get("cells"),
        "zones": derived.get("zones"), "watertight": component.part.watertight,
    }


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--material", default="standard-resin")
    args = ap.parse_args()
    material = catalogue.material(args.material)
    for name, (kind, params) in PARTS.items():
        result = time_part(kind, params, material, args.runs)
        peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(json.dumps({"part": name, **result, "peak_rss_mb": round(peak_mb)}))


if __name__ == "__main__":
    main()
