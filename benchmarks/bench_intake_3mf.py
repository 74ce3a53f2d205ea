"""Time intake on 3MF component fan-outs: one cube placed N times by one assembly object.

    .venv/bin/python benchmarks/bench_intake_3mf.py [--components 2000 8000 30000] [--runs 1]

The file is small (the components compress to a few bytes each) but expands to 12 N triangles; the
reader must stay linear in N. Prints one JSON line per size, to paste into benchmarks/README.md
("Intake: 3MF components").
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

from services.intake import IntakeLimits, read_part  # noqa: E402
from tests.data.make_files import fan_out_3mf  # noqa: E402


def time_one(components: int, runs: int) -> dict:
    """Return the read times of one fan-out size and what was read."""
    data = fan_out_3mf(components)
    limits = IntakeLimits(max_triangles=20_000_000)
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        part = read_part(data, name=f"fan-out-{components}.3mf", limits=limits)
        times.append(round(time.perf_counter() - t0, 3))
    return {"components": components, "file_bytes": len(data), "read_s": times, "triangles": len(part.faces),
            "bodies": part.bodies, "peak_rss_mb": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--components", type=int, nargs="+", default=[2000, 8000, 30000])
    ap.add_argument("--runs", type=int, default=1)
    args = ap.parse_args()
    for n in args.components:
        print(json.dumps(time_one(n, args.runs)), flush=True)


if __name__ == "__main__":
    main()
