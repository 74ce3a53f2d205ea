"""Time the worker's intake of a large binary STL, each run in a fresh process.

    .venv/bin/python benchmarks/make_reference_parts.py --only smooth_lens_2m   # once
    .venv/bin/python benchmarks/bench_intake_stl.py [--part smooth_lens_2m] [--runs 3]

Each run reads the file's bytes, then times ``read_part`` alone (CPU and wall) and reports the
process's peak resident memory (CPU split into user and kernel time: on this machine fresh pages cost
the kernel about as much as the arithmetic), the load average, and a digest of what was read (vertices and faces
after repair, findings, volume, bodies) so that two versions of intake can be compared for identical
results. Prints one JSON line per run, to paste into benchmarks/README.md ("Intake of a 2M-triangle STL").
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_rules import peak_rss_mb  # noqa: E402
from make_reference_parts import PARTS_DIR  # noqa: E402

from services.intake import read_part  # noqa: E402


def part_digest(part) -> str:
    """Return a short digest of everything intake decides: arrays after repair, findings, volume, bodies."""
    h = hashlib.sha256()
    for array in (part.vertices_mm, part.faces):
        h.update(str(array.dtype).encode() + str(array.shape).encode() + array.tobytes())
    h.update(repr([f.to_dict() for f in part.findings]).encode())
    h.update(repr((part.volume_mm3, part.bodies, part.watertight)).encode())
    return h.hexdigest()[:16]


def run_once(name: str) -> dict:
    """Read one part's bytes, then time read_part on them."""
    data = (PARTS_DIR / f"{name}.stl").read_bytes()
    load = os.getloadavg()[0]
    start, before = time.perf_counter(), resource.getrusage(resource.RUSAGE_SELF)
    part = read_part(data, name=f"{name}.stl")
    wall_s, after = time.perf_counter() - start, resource.getrusage(resource.RUSAGE_SELF)
    user_s, sys_s = after.ru_utime - before.ru_utime, after.ru_stime - before.ru_stime
    return {"part": name, "triangles": len(part.faces), "vertices": len(part.vertices_mm),
            "cpu_s": round(user_s + sys_s, 2), "user_s": round(user_s, 2), "sys_s": round(sys_s, 2),
            "wall_s": round(wall_s, 2), "peak_rss_mb": round(peak_rss_mb()),
            "file_mb": round(len(data) / 2**20), "load": round(load, 1), "bodies": part.bodies,
            "volume_mm3": round(part.volume_mm3, 3), "findings": len(part.findings), "digest": part_digest(part)}


def fresh(name: str) -> dict:
    """Run one timing in a new interpreter, so memory and caches start alike."""
    cmd = [sys.executable, __file__, "--part", name, "--child"]
    out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
    return json.loads(out.strip().splitlines()[-1])


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--part", default="smooth_lens_2m")
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if not (PARTS_DIR / f"{args.part}.stl").exists():
        raise SystemExit(f"{args.part}.stl is missing: run benchmarks/make_reference_parts.py --only {args.part}")
    if args.child:
        print(json.dumps(run_once(args.part)))
        return 0
    for _ in range(args.runs):
        print(json.dumps(fresh(args.part)), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
