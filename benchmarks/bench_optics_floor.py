"""Time the optics stage of a check against its floor, in one run, and say where the rest goes.

    .venv/bin/python benchmarks/make_reference_parts.py --only smooth_lens_2m zoned_lens_60mm   # once
    .venv/bin/python benchmarks/bench_optics_floor.py --case zoned_lens_60mm --freq-ghz 140 --focal-length-mm 72
    .venv/bin/python benchmarks/bench_optics_floor.py --case smooth_lens_2m --freq-ghz 140

One fresh process per call: the STL read by intake (as the worker does), laid up on ``bay1-lcd-resin`` at the
given grid (not timed), then ``optics_report`` as a check calls it, one design frequency. The floor is the
issue's "FFT work" (every ``scipy.fft`` and ``numpy.fft`` call timed where it is made) plus one unpacked read of
every distinct layer, which any optics of the printed part must make at least once, and of every layer of an
as-designed raster the optics sliced (where the printer's own grid is too coarse for the design). That slicing is
timed too and reported beside the ratio, as the ratio without it: a slicing has its own floor. The stage's own parts are
timed where the pipeline calls them (plans, cells' transmission, focus, figures); the JSON line printed last
holds them all, for benchmarks/README.md ("Optics against its floor").
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from collections import defaultdict
from dataclasses import replace
from pathlib import Path

import numpy as np
import scipy.fft

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from make_reference_parts import PARTS_DIR  # noqa: E402

FFT_NAMES = ("fft", "ifft", "fft2", "ifft2", "rfft2", "irfft2", "fftn", "ifftn")
STAGE_PARTS = ("frequency_plans", "cell_index_for", "cell_sparams", "focus_metrics", "losses", "_figures",
               "spiral_plate", "_vortex")


class Clock:
    """Seconds spent inside wrapped callables, by name (nested calls counted in each)."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = defaultdict(float)
        self.calls: dict[str, int] = defaultdict(int)

    def wrap(self, owner, name: str, label: str) -> None:
        inner = getattr(owner, name)

        def timed(*args, **kwargs):
            t0 = time.perf_counter()
            try:
                return inner(*args, **kwargs)
            finally:
                self.seconds[label] += time.perf_counter() - t0
                self.calls[label] += 1

        setattr(owner, name, timed)


def _keep_designed_stacks(clock: Clock) -> list:
    """Time the as-designed slicings (a slicing, whose own floor is bench_layers.py's) and keep their stacks, so the
    floor can read their layers too: the optics reads every layer of each as-designed raster as well."""
    from services.optics import plan

    kept = []
    inner = plan.build_layer_stack

    def sliced(*args, **kwargs):
        start = time.perf_counter()
        stack = inner(*args, **kwargs)
        clock.seconds["as_designed_slicing"] += time.perf_counter() - start
        kept.append(stack)
        return stack

    plan.build_layer_stack = sliced
    return kept


def read_floor_s(stack) -> float:
    """Return the seconds to unpack every distinct layer of the stack once."""
    t0 = time.perf_counter()
    for d in range(stack.distinct_count):
        stack._unpack(d)
    return time.perf_counter() - t0


def run(args: argparse.Namespace) -> dict:
    from services import catalogue
    from services.intake import read_part
    from services.layers import build_layer_stack, orient_part
    from services.optics import pipeline
    from services.settings import OpticsSettings

    printer = replace(catalogue.printer("bay1-lcd-resin"), pixel_mm=args.px, layer_height_mm=args.dz)
    material = catalogue.material("standard-resin")
    part = orient_part(read_part((PARTS_DIR / f"{args.case}.stl").read_bytes(), name=f"{args.case}.stl", units="mm"),
                       "+z")
    stack = build_layer_stack(part, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)
    read_s = read_floor_s(stack)
    clock = Clock()
    for name in FFT_NAMES:
        clock.wrap(scipy.fft, name, "fft")
        clock.wrap(np.fft, name, "fft")
    for name in STAGE_PARTS:
        clock.wrap(pipeline, name, name)
    designed = _keep_designed_stacks(clock)
    settings = OpticsSettings(freqs_ghz=(args.freq_ghz,), focal_length_mm=args.focal_length_mm)
    if args.warm:  # as a worker child sees every check after its first: matplotlib and its fonts loaded
        pipeline.optics_report(part=part, printed=stack, material=material, printer=printer, settings=settings)
        clock.seconds.clear()
        clock.calls.clear()
        designed.clear()
    t0, c0 = time.perf_counter(), time.process_time()
    pipeline.optics_report(part=part, printed=stack, material=material, printer=printer, settings=settings)
    optics_s, cpu_s = time.perf_counter() - t0, time.process_time() - c0
    designed_read_s = sum(read_floor_s(d) for d in designed)
    floor_s = clock.seconds["fft"] + read_s + designed_read_s
    slicing_s = clock.seconds.get("as_designed_slicing", 0.0)
    return {"case": args.case, "px_mm": args.px, "dz_mm": args.dz, "freq_ghz": args.freq_ghz,
            "focal_length_mm": args.focal_length_mm, "warm": args.warm, "distinct_layers": stack.distinct_count,
            "optics_s": round(optics_s, 3), "optics_cpu_s": round(cpu_s, 3), "fft_s": round(clock.seconds["fft"], 3),
            "fft_calls": clock.calls["fft"], "read_s": round(read_s, 3),
            "as_designed_read_s": round(designed_read_s, 3), "floor_s": round(floor_s, 3),
            "ratio": round(optics_s / floor_s, 2),
            "ratio_without_as_designed_slicing": round((optics_s - slicing_s) / floor_s, 2),
            "load": round(os.getloadavg()[0], 1),
            "parts_s": {k: round(v, 3) for k, v in clock.seconds.items() if k != "fft"}}


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--case", default="zoned_lens_60mm")
    parser.add_argument("--px", type=float, default=0.025)
    parser.add_argument("--dz", type=float, default=0.025)
    parser.add_argument("--freq-ghz", type=float, default=140.0)
    parser.add_argument("--focal-length-mm", type=float)
    parser.add_argument("--warm", action="store_true", help="time a second optics run in the same process")
    args = parser.parse_args(argv)
    print(json.dumps(run(args)))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
