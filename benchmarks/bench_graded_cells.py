"""How far the graded-index generator's designed phase is from what the check predicts, and its time.

    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_graded_cells.py [period_mm | default] [square | hex]

The 300 GHz plate of docs/rigorous-cells.md (12 mm, f = 18 mm, eps 2.8, tan delta 0.03, 1 mm base, no
printer, default period and height unless a period is given), pillars and holes: every cell's fill goes
through the check's cell model (``cell_model.cell_index_for`` on the generated part: the rigorous table
at the run's frequency, equivalent layer on the base, as ``transmission.cell_sparams`` stacks it), and
its delay is compared with the generator's target over the aperture, after removing the mean (piston).
The generator runs twice into a fresh cache folder: cold (tables built) and warm (read).
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from services.components import build_component  # noqa: E402
from services.optics.cell_model import cell_index_for  # noqa: E402
from services.optics.materials import rf_values, wavelength_mm  # noqa: E402
from services.optics.transfer import cascade_abcd, s_parameters  # noqa: E402
from services.profiles import Material, RFPoint  # noqa: E402

RESIN = Material(slug="bench", name="Bench resin", kind="resin", processes=("vat_photopolymerisation",),
                 density_g_cm3=1.15, price=100.0, price_unit="l", currency="EUR", waste_factor=0.1,
                 rf=(RFPoint(50.0, 2.8, 0.03, "bench value"), RFPoint(2000.0, 2.8, 0.03, "bench value")))
FREQ_GHZ = 300.0


def check_delay_rad(component) -> np.ndarray:
    """Return each cell's delay -arg S21 as the check's cell model predicts it (base + cell layer)."""
    params = component.part.parameters
    rf = rf_values(RESIN, [FREQ_GHZ])
    index, _ = cell_index_for(component.part, rf, (float(params["period_mm"]), "declared"))
    n, z = index(component.cells.fill)
    n_base = np.sqrt(complex(index.eps[0]))
    layers = [(n[0], z[0], params["height_mm"]), (n_base, 1 / n_base, params["base_thickness_mm"])]
    s21 = s_parameters(*cascade_abcd(layers, 2 * np.pi / float(wavelength_mm(FREQ_GHZ))))[1]
    return -np.angle(s21)


def agreement(component) -> dict:
    """Return the rms and largest phase difference (deg) between the generator's target and the check."""
    diff = np.exp(1j * (check_delay_rad(component) - component.cells.target_rad))
    residual = np.angle(diff * np.exp(-1j * np.angle(diff.mean())))
    return {"rms_deg": round(float(np.degrees(np.sqrt(np.mean(residual**2)))), 2),
            "max_deg": round(float(np.degrees(np.abs(residual).max())), 2)}


def main(period_mm: float | None = None, lattice: str = "square") -> dict:
    out = {}
    for cell in ("pillar", "hole"):
        params = {"freq_ghz": FREQ_GHZ, "diameter_mm": 12.0, "focal_length_mm": 18.0, "flange_width_mm": 0.0,
                  "cell": cell, "lattice": lattice, **({"period_mm": period_mm} if period_mm else {})}
        with tempfile.TemporaryDirectory() as folder:
            os.environ["PHASEWRIGHT_CELL_TABLE_DIR"] = folder
            times = []
            for _ in range(2):
                w0, c0 = time.perf_counter(), time.process_time()
                component = build_component("graded-index", params, material=RESIN, printer=None)
                times.append((round(time.perf_counter() - w0, 2), round(time.process_time() - c0, 2)))
            d = component.derived
            out[cell] = {"period_mm": d["period_mm"], "height_mm": d["height_mm"], "cells": d["cells"],
                         "reported_rms_rad": round(d["phase_rms_error_rad"], 4),
                         "designed_by": (d.get("cell_model") or {}).get("cells_by_model", "effective medium"),
                         "target_vs_check": agreement(component),
                         "cold_wall_cpu_s": times[0], "warm_wall_cpu_s": times[1]}
    return out


if __name__ == "__main__":
    given = sys.argv[1] if len(sys.argv) > 1 and sys.argv[1] != "default" else None
    print(json.dumps(main(float(given) if given else None, sys.argv[2] if len(sys.argv) > 2 else "square"), indent=2))
