"""Time a whole check (intake to alternatives) with rules and optics in order and side by side.

    .venv/bin/python benchmarks/make_reference_parts.py --only zoned_lens_60mm pillar_plate_30mm   # once
    .venv/bin/python benchmarks/bench_check.py                 # every case, both modes, 3 runs, a table
    .venv/bin/python benchmarks/bench_check.py --case pillar_plate_30mm --px 0.05 --dz 0.05 --sequential

Each run is a fresh process: read the STL with intake (``read_part``, as the worker does), then
``build_report`` on ``bay1-lcd-resin`` at the case's grid with ``standard-resin``, one design frequency.
It records wall seconds, CPU seconds of the whole process (all threads), peak resident memory (VmHWM),
the wall time from the rules' start to the optics' end (the part that runs side by side) and the
report's stage timings. Runs alternate between the modes so a change in the machine's load
hits both alike; the load average is recorded with each run.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_rules import peak_rss_mb  # noqa: E402
from make_reference_parts import PARTS_DIR  # noqa: E402

# (part, pixel mm, layer mm, design frequency GHz, focal length mm): the plate and lens grids.
CASES = (("pillar_plate_30mm", 0.05, 0.05, 300.0, None), ("pillar_plate_30mm", 0.025, 0.025, 300.0, None),
         ("zoned_lens_60mm", 0.025, 0.025, 140.0, 72.0))
RUNS = 3


def run_case(name: str, px: float, dz: float, freq_ghz: float, focal_mm: float | None, concurrent: bool) -> dict:
    """Check one part once in this process; return the times, the memory and a digest of the report."""
    from services import catalogue
    from services.intake import read_part
    from services.report import build_report
    from services.settings import CheckSettings, OpticsSettings

    printer = replace(catalogue.printer("bay1-lcd-resin"), pixel_mm=px, layer_height_mm=dz)
    settings = CheckSettings(optics=OpticsSettings(freqs_ghz=(freq_ghz,), focal_length_mm=focal_mm))
    data = (PARTS_DIR / f"{name}.stl").read_bytes()
    base_mb = peak_rss_mb()
    entered: dict[str, float] = {}  # stage -> when the progress first named it

    def progress(stage: str, fraction: float) -> None:
        entered.setdefault(stage, time.perf_counter())

    start, cpu = time.perf_counter(), time.process_time()
    part = read_part(data, name=f"{name}.stl", units="mm")
    report = build_report(part=part, printer=printer, material=catalogue.material("standard-resin"),
                          settings=settings, concurrent_stages=concurrent, progress=progress)
    wall_s, cpu_s = time.perf_counter() - start, time.process_time() - cpu
    return {"case": name, "px_mm": px, "dz_mm": dz, "mode": "side by side" if concurrent else "in order",
            "wall_s": round(wall_s, 2), "cpu_s": round(cpu_s, 2),
            "rules_to_optics_end_s": round(entered["pictures"] - entered["rules"], 2), "peak_rss_mb": round(peak_rss_mb()),
            "imported_rss_mb": round(base_mb), "load": round(os.getloadavg()[0], 1), "timings_s": report.timings_s,
            "verdict": report.verdict, "findings": len(report.findings)}


def _child(case: tuple, concurrent: bool) -> dict:
    name, px, dz, freq, focal = case
    argv = [sys.executable, __file__, "--case", name, "--px", str(px), "--dz", str(dz), "--freq-ghz", str(freq)]
    argv += ["--focal-length-mm", str(focal)] if focal else []
    argv += [] if concurrent else ["--sequential"]
    out = subprocess.run(argv, capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _row(r: dict) -> str:
    t = r["timings_s"]
    return (f"{r['case']:18s} {r['px_mm'] * 1000:.0f}/{r['dz_mm'] * 1000:.0f} um  {r['mode']:12s} wall {r['wall_s']:6.2f} s"
            f"  cpu {r['cpu_s']:6.2f} s  {r['peak_rss_mb']:5d} MB  rules..optics {r['rules_to_optics_end_s']:6.2f} s"
            f" (rules {t['rules']:.2f}, optics {t['optics']:.2f}, alternatives {t['alternatives']:.2f})"
            f"  load {r['load']}")


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--case")
    parser.add_argument("--px", type=float, default=0.05)
    parser.add_argument("--dz", type=float, default=0.05)
    parser.add_argument("--freq-ghz", type=float, default=140.0)
    parser.add_argument("--focal-length-mm", type=float)
    parser.add_argument("--sequential", action="store_true")
    parser.add_argument("--runs", type=int, default=RUNS)
    parser.add_argument("--out", default=str(ROOT / "benchmarks" / "results_check.json"))
    args = parser.parse_args(argv)
    if args.case:
        print(json.dumps(run_case(args.case, args.px, args.dz, args.freq_ghz, args.focal_length_mm,
                                  not args.sequential)))
        return 0
    results = []
    for case in CASES:
        for _ in range(args.runs):
            for concurrent in (False, True):
                results.append(_child(case, concurrent))
                print(_row(results[-1]), flush=True)
    Path(args.out).write_text(json.dumps(results, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
