"""How coarse the as-designed raster may be: the optics' as-designed numbers on forced rasters against a finer one.

    .venv/bin/python benchmarks/make_reference_parts.py --only zoned_lens_60mm smooth_lens_2m pillar_plate_30mm
    .venv/bin/python benchmarks/bench_design_grid.py [--cases NAME ...] [--grids rule 1x1 2x2 ...]
    .venv/bin/python benchmarks/bench_design_grid.py --table      # reprint the table from the saved runs

Each case is one part at its usual frequency on ``bay1-lcd-resin`` at the case's grid, ``standard-resin``.
Each run is a fresh process: ``optics_report`` with the as-designed raster forced to the printer's pixel / j
and layer / i (``rule``: what ``grids.design_grid`` chooses). It records the as-designed numbers a report
carries (loss, wavefront and best focus, FWHM, Strehl, focusing efficiency, and the printed-vs-designed
phase-error Strehl), the CPU and wall time of the design slicing and of the design model's pass over its
raster, and peak memory. Raw runs go to ``results_design_grid.json``; ``--table`` compares every run with
the case's finest raster (the reference). The "rule before" rows ran this script in an export of main at 58f0ec0 (the old rule)
and were merged into the saved runs by hand.
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

RESULTS = Path(__file__).resolve().parent / "results_design_grid.json"
CELL_TABLE_DIR = Path("/tmp/phasewright-bench-cell-tables")

# name -> (source: an STL in benchmarks/parts or a generated kind with its parameters, printer pixel mm,
# printer layer mm, frequency GHz, focal length mm)
CASES = {
    "zoned_lens_60mm@50um": ("zoned_lens_60mm", 0.05, 0.05, 140.0, 72.0),
    "zoned_lens_60mm@25um": ("zoned_lens_60mm", 0.025, 0.025, 140.0, 72.0),
    "smooth_lens_2m@25um": ("smooth_lens_2m", 0.025, 0.025, 140.0, 72.0),
    "zoned_lens_60mm@100/200um": ("zoned_lens_60mm", 0.1, 0.2, 140.0, 72.0),
    "zoned_lens_60mm@60/50um": ("zoned_lens_60mm", 0.06, 0.05, 140.0, 72.0),
    "pillar_plate_30mm@50um": ("pillar_plate_30mm", 0.05, 0.05, 300.0, 30.0),
    "plano_convex_60mm@50um": (("plano-convex", {"diameter_mm": 60, "focal_length_mm": 72, "freq_ghz": 140}),
                               0.05, 0.05, 140.0, 72.0),
    "graded_plate_24mm@50um": (("graded-index", {"diameter_mm": 24, "focal_length_mm": 24, "freq_ghz": 300,
                                                 "flange_width_mm": 0}), 0.05, 0.05, 300.0, 24.0),
}
# The rasters each case runs: the rule's, coarser ones, and finer ones up to the reference (the finest).
GRIDS = {case: ("rule", "1x1", "1x2", "2x1", "3x3", "4x4") for case in CASES}
GRIDS["zoned_lens_60mm@25um"] = ("rule", "1x1", "2x1", "2x2", "2x4")
GRIDS["smooth_lens_2m@25um"] = ("rule", "1x2", "2x1", "2x2")
GRIDS["zoned_lens_60mm@100/200um"] = ("rule", "2x1", "2x2", "3x3", "4x6")
GRIDS["zoned_lens_60mm@60/50um"] = ("rule", "2x1", "4x4")


def load_part(source, material):
    """Return the oriented part: an STL read as a raw triangle soup, or a generated component."""
    from bench_optics import read_part
    from services.components import build_component
    from services.layers import orient_part

    if isinstance(source, str):
        return orient_part(read_part(PARTS_DIR / f"{source}.stl"), "+z")
    kind, params = source
    # Designed without a printer, as bench_graded_cells.py does: Bay 1's holes would not fit the lattice.
    return orient_part(build_component(kind, params, material=material).part, "+z")


def _instrument(printed, grid: str) -> tuple[dict, list]:
    """Force the as-designed raster to ``grid`` and time the design's slicing and pass; return where both land."""
    from services.optics import grids, pipeline, plan

    timing: dict = {}
    chosen_rule: list[dict] = []
    rule = grids.design_grid

    def forced(part, **kw):
        chosen = rule(part, **kw)
        chosen_rule.append(chosen.to_dict())
        if grid == "rule":
            return chosen
        j, i = (int(v) for v in grid.split("x"))
        return grids.DesignGrid(kw["printer_pixel_mm"] / j, kw["printer_layer_mm"] / i, f"forced: / {j}, / {i}")

    def timed(name, fn):
        def wrapper(*args, **kw):
            if name in timing or args[0] is printed:  # only the design's slicing and its model's pass
                return fn(*args, **kw)
            rss, cpu, wall = peak_rss_mb(), time.process_time(), time.perf_counter()
            out = fn(*args, **kw)
            timing[name] = {"cpu_s": round(time.process_time() - cpu, 2),
                            "wall_s": round(time.perf_counter() - wall, 2),
                            "peak_mb": round(peak_rss_mb()), "peak_before_mb": round(rss)}
            return out
        return wrapper

    grids.design_grid = forced
    plan.build_layer_stack = timed("design_stack", plan.build_layer_stack)
    pipeline.cell_sparams = timed("design_pass", pipeline.cell_sparams)
    return timing, chosen_rule


def run_one(case: str, grid: str) -> dict:
    """Run one case's optics in this process with the as-designed raster forced to ``grid``; return the digest."""
    os.environ.setdefault("PHASEWRIGHT_CELL_TABLE_DIR", str(CELL_TABLE_DIR))
    from services import catalogue
    from services.layers import build_layer_stack
    from services.optics import optics_report
    from services.settings import OpticsSettings

    source, px, dz, freq, focal = CASES[case]
    printer = replace(catalogue.printer("bay1-lcd-resin"), pixel_mm=px, layer_height_mm=dz)
    material = catalogue.material("standard-resin")
    part = load_part(source, material)
    printed = build_layer_stack(part, pixel_mm=px, layer_height_mm=dz)
    timing, chosen_rule = _instrument(printed, grid)
    settings = OpticsSettings(freqs_ghz=(freq,), focal_length_mm=focal, edge_taper_db=10.0)
    cpu, wall, load = time.process_time(), time.perf_counter(), os.getloadavg()[0]
    s = optics_report(part=part, printed=printed, material=material, printer=printer, settings=settings,
                      with_figures=False).to_dict()
    d = s["as_designed"]
    dgrid = s["analysis"]["as_designed_grid"]
    f = d["focus"]
    return {"case": case, "grid": grid, "pixel_mm": dgrid["pixel_mm"], "layer_mm": dgrid["layer_height_mm"],
            "why": dgrid["why"], "rule": chosen_rule[0],
            "loss_db": d["transmission_loss_db"][0], "wavefront_focus_mm": f["wavefront_focus_mm"][0],
            "best_focus_mm": f["best_focus_mm"][0], "fwhm_mm": sum(f["fwhm_mm"][0]) / 2, "strehl": f["strehl"][0],
            "efficiency": f["focusing_efficiency"][0], "phase_error_strehl": s["phase_error"]["strehl"][0],
            **{f"{k}_{m}": v for k, t in timing.items() for m, v in t.items()},
            "optics_cpu_s": round(time.process_time() - cpu, 2), "optics_wall_s": round(time.perf_counter() - wall, 2),
            "peak_mb": round(peak_rss_mb()), "load": round(load, 1)}


# The stated error: how far from the reference an as-designed number may lie (tests/services/optics/test_grids.py).
BOUND = {"loss_db": 0.01, "wavefront_focus_mm": 0.15, "best_focus_mm": 0.15, "fwhm_mm": 0.005, "strehl": 0.005,
         "efficiency": 0.002, "phase_error_strehl": 0.01}
METRICS = (("loss_db", "loss dB", "abs", 4), ("wavefront_focus_mm", "wavefront focus mm", "abs", 3),
           ("best_focus_mm", "best focus mm", "abs", 3), ("fwhm_mm", "FWHM mm", "rel", 3),
           ("strehl", "Strehl", "abs", 4), ("efficiency", "efficiency", "abs", 4),
           ("phase_error_strehl", "phase-error Strehl", "abs", 4))


def table(runs: list[dict]) -> str:
    """Return the markdown table: each run's numbers and its error against the case's finest raster."""
    head = ["part @ printer grid", "raster (j x i): pixel / layer um"]
    head += [label for _, label, _, _ in METRICS]
    head += ["outside the bound", "slicing CPU / wall s", "design pass CPU s", "optics CPU s",
             "peak MB (slicing / run)", "load"]
    rows = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for case in dict.fromkeys(r["case"] for r in runs):
        mine = [r for r in runs if r["case"] == case]
        ref = min(mine, key=lambda r: r["pixel_mm"] * r["layer_mm"])
        for r in sorted(mine, key=lambda r: -r["pixel_mm"] * r["layer_mm"]):
            cells = [case, f"{r['grid']}: {r['pixel_mm'] * 1000:.2f} / {r['layer_mm'] * 1000:.2f}"]
            for key, _, kind, digits in METRICS:
                v = r[key]
                if r is ref:
                    cells.append(f"{v:.{digits}f} (ref.)")
                elif kind == "rel":
                    cells.append(f"{v:.{digits}f} ({100 * (v - ref[key]) / ref[key]:+.2f} %)")
                else:
                    cells.append(f"{v:.{digits}f} ({v - ref[key]:+.{digits}f})")
            outside = [label for key, label, kind, _ in METRICS if r is not ref and _outside(r, ref, key, kind)]
            cells.append(", ".join(outside) or "-")
            # No design slicing or pass of its own: the printed stack and its nominal model serve as the design.
            cells += [f"{r.get('design_stack_cpu_s', 0)} / {r.get('design_stack_wall_s', 0)}",
                      f"{r.get('design_pass_cpu_s', 0)}", f"{r['optics_cpu_s']}",
                      f"{r.get('design_stack_peak_mb', '-')} / {r['peak_mb']}", f"{r['load']}"]
            rows.append("| " + " | ".join(cells) + " |")
    return "\n".join(rows)


def _outside(run: dict, ref: dict, key: str, kind: str) -> bool:
    """Return whether the run's number lies outside BOUND of the reference's (FWHM: relative)."""
    error = run[key] - ref[key]
    return abs(error / ref[key] if kind == "rel" else error) > BOUND[key] + 1e-9


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cases", nargs="*", choices=sorted(CASES), help="the cases to run (default: all)")
    ap.add_argument("--grids", nargs="*", help="rasters: rule, or JxI (pixel / J, layer / I); default: the case's")
    ap.add_argument("--one", nargs=2, metavar=("CASE", "GRID"), help=argparse.SUPPRESS)
    ap.add_argument("--table", action="store_true", help="print the table from the saved runs")
    args = ap.parse_args()
    if args.one:
        print(json.dumps(run_one(*args.one)))
        return
    runs = json.loads(RESULTS.read_text()) if RESULTS.exists() else []
    if not args.table:
        for case in args.cases or CASES:
            for grid in args.grids or GRIDS[case]:
                out = subprocess.run([sys.executable, __file__, "--one", case, grid], capture_output=True, text=True)
                if out.returncode:
                    print(f"{case} {grid} failed:\n{out.stderr[-2000:]}", file=sys.stderr)
                    continue
                run = json.loads(out.stdout.splitlines()[-1])
                print(json.dumps(run), flush=True)
                runs = [r for r in runs if (r["case"], r["grid"]) != (case, grid)] + [run]
                RESULTS.write_text(json.dumps(runs, indent=1) + "\n")
    print(table(runs))


if __name__ == "__main__":
    main()
