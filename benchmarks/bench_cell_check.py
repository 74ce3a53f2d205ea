"""A whole check of a 3,000-cell pillar plate with its cells from a cached rigorous table, against the same plate
checked with the effective medium (the generator's lattice declaration removed).

    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_cell_check.py

The plate: 30 mm, f = 30 mm, 300 GHz, square lattice of round pillars at a 0.485 mm period (about 3,000 cells),
standard resin, checked on Bay 1 at 285 / 300 / 315 GHz. The first check builds the table into a fresh cache
folder (not timed against the target); then each model is checked three times and the median wall and CPU
seconds of the whole check and of its optics stage are printed. Target (issue 12): the cached rigorous check
within 1.2 x the effective-medium check.
"""

from __future__ import annotations

import json
import os
import statistics
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from services import catalogue  # noqa: E402
from services.components import build_component  # noqa: E402
from services.report import build_report  # noqa: E402
from services.settings import CheckSettings, OpticsSettings  # noqa: E402

RUNS = 3


def _timed(part, printer, material, settings) -> dict:
    w0, c0 = time.perf_counter(), time.process_time()
    report = build_report(part=part, printer=printer, material=material, settings=settings)
    return {"wall_s": time.perf_counter() - w0, "cpu_s": time.process_time() - c0,
            "optics_s": report.timings_s["optics"],
            "model": (report.optics or {}).get("analysis", {}).get("cell_model", {}).get("model", "?")}


def main() -> dict:
    material, printer = catalogue.material("standard-resin"), catalogue.printer("bay1-lcd-resin")
    params = {"diameter_mm": 30.0, "focal_length_mm": 30.0, "freq_ghz": 300.0, "cell": "pillar", "period_mm": 0.485,
              "height_mm": 2.2}
    settings = CheckSettings(quantities=(1,), optics=OpticsSettings(freqs_ghz=(285.0, 300.0, 315.0)))
    out = {}
    with tempfile.TemporaryDirectory() as folder:
        os.environ["PHASEWRIGHT_CELL_TABLE_DIR"] = folder
        part = build_component("graded-index", params, material=material).part
        undeclared = replace(part, parameters={k: v for k, v in part.parameters.items() if k not in ("cell", "lattice")})
        first = _timed(part, printer, material, settings)
        out["first_check_with_table_build_s"] = round(first["wall_s"], 1)
        for name, p in (("rigorous_cached", part), ("effective_medium", undeclared)):
            runs = [_timed(p, printer, material, settings) for _ in range(RUNS)]
            out[name] = {k: round(statistics.median(r[k] for r in runs), 2) for k in ("wall_s", "cpu_s", "optics_s")}
            out[name]["model"] = runs[0]["model"]
    out["ratio_wall"] = round(out["rigorous_cached"]["wall_s"] / out["effective_medium"]["wall_s"], 2)
    out["ratio_cpu"] = round(out["rigorous_cached"]["cpu_s"] / out["effective_medium"]["cpu_s"], 2)
    out["cells"] = part.parameters.get("cells") or part.parameters.get("cell_count")
    out["load_average"] = [round(x, 1) for x in os.getloadavg()]
    print(json.dumps(out, indent=1))
    return out


if __name__ == "__main__":
    main()
