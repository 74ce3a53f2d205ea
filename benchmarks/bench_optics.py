"""Time the full optics section on the 60 mm zoned lens at 140 GHz, 7 frequencies, in this process.

    .venv/bin/python benchmarks/make_reference_parts.py --only zoned_lens_60mm   # once
    .venv/bin/python benchmarks/bench_optics.py [--printer bay1-lcd-resin] [--material standard-resin]

Prints one JSON line: wall time per stage, peak resident memory, the analysis and design grids, and
the headline numbers, so a result can be pasted into benchmarks/README.md ("Optics").
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from services import catalogue  # noqa: E402
from services.layers import build_layer_stack, orient_part  # noqa: E402
from services.optics import optics_report  # noqa: E402
from services.part import Part  # noqa: E402
from services.settings import OpticsSettings  # noqa: E402

PART = ROOT / "benchmarks" / "parts" / "zoned_lens_60mm.stl"
STL_RECORD = np.dtype([("normal", "<f4", 3), ("v", "<f4", (3, 3)), ("attr", "<u2")])
FREQS_GHZ = (125.0, 130.0, 135.0, 140.0, 145.0, 150.0, 155.0)
FOCAL_MM = 72.0


def read_part(path: Path) -> Part:
    """Return the STL's raw triangle soup as a Part (no vertex merging: slicing does not need it)."""
    with open(path, "rb") as fh:
        fh.seek(80)
        count = int(np.frombuffer(fh.read(4), "<u4")[0])
        tris = np.fromfile(fh, dtype=STL_RECORD, count=count)["v"]
    return Part(name=path.stem, sha256="bench", source_format="stl", units="mm",
                vertices_mm=tris.reshape(-1, 3).astype(np.float64),
                faces=np.arange(3 * len(tris), dtype=np.int64).reshape(-1, 3), bodies=1, watertight=True)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--printer", default="bay1-lcd-resin")
    ap.add_argument("--material", default="standard-resin")
    args = ap.parse_args()
    if not PART.exists():
        raise SystemExit("run benchmarks/make_reference_parts.py --only zoned_lens_60mm first")
    printer, material = catalogue.printer(args.printer), catalogue.material(args.material)
    part = orient_part(read_part(PART), "+z")
    t0 = time.perf_counter()
    stack = build_layer_stack(part, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)
    t1 = time.perf_counter()
    settings = OpticsSettings(freqs_ghz=FREQS_GHZ, focal_length_mm=FOCAL_MM, edge_taper_db=10.0)
    result = optics_report(part=part, printed=stack, material=material, printer=printer, settings=settings)
    t2 = time.perf_counter()
    s = result.to_dict()
    print(json.dumps({
        "part": PART.stem, "printer": printer.slug, "material": material.slug, "freqs_ghz": list(FREQS_GHZ),
        "printed_stack_s": round(t1 - t0, 2), "optics_s": round(t2 - t1, 2),
        "peak_rss_mb": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0, 1),
        "printed_stack": stack.summary(), "analysis": s["analysis"],
        "transmission_loss_db": s["transmission_loss_db"], "focus": s["focus"],
        "phase_error_strehl": s["phase_error"]["strehl"], "findings": [f.to_dict() for f in result.findings],
    }))


if __name__ == "__main__":
    main()
