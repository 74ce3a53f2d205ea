"""Trace one whole check's memory: resident size and malloc's bytes in use every 10 ms, and where the peak is.

    .venv/bin/python benchmarks/trace_memory.py --case zoned_lens_100mm --px 0.025 --freq-ghz 140
    .venv/bin/python benchmarks/trace_memory.py --case zoned_lens_100mm --px 0.025 --stacks-above-mb 1000

The check is the one ``bench_check.py`` runs (intake's ``read_part``, then ``build_report`` on ``bay1-lcd-resin`` at
the case's grid, ``standard-resin``, one frequency), in this process. A sampling thread reads the resident size
(``/proc/self/statm``) and glibc's ``mallinfo2`` (bytes in use in the heaps plus in mapped blocks, and bytes
held free), so a peak made of live arrays tells itself apart from one made of freed memory the heap keeps. It
prints the peak and when it came, the time each stage began, a timeline every half second, and with
``--stacks-above-mb`` the Python stacks of every thread the first few times the resident size passes that
bound (which stage, which line, was allocating). The sampler holds the GIL briefly every 10 ms: times run a
little longer than ``bench_check.py``'s; read the memory, not the time.
"""

from __future__ import annotations

import argparse
import sys
import threading
import time
import traceback
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from make_reference_parts import PARTS_DIR  # noqa: E402

PAGE_MB = 4096 / 2**20
SAMPLE_S = 0.01
STACK_DUMPS = 4


def resident_mb() -> float:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * PAGE_MB


class Sampler(threading.Thread):
    """Sample (time, resident MB, in use MB, held free MB) until stopped; keep stacks past a bound."""

    def __init__(self, stacks_above_mb: float | None) -> None:
        super().__init__(daemon=True)
        from services.limits import _mallinfo2

        self.info = _mallinfo2()
        self.samples: list[tuple[float, float, float, float]] = []
        self.stacks: list[tuple[float, dict[str, list[str]]]] = []
        self.bound = stacks_above_mb
        self.done = threading.Event()

    def run(self) -> None:
        while not self.done.is_set():
            rss = resident_mb()
            used = free = float("nan")
            if self.info is not None:
                m = self.info()
                used, free = (m.uordblks + m.hblkhd) / 2**20, m.fordblks / 2**20
            self.samples.append((time.perf_counter(), rss, used, free))
            if self.bound is not None and rss > self.bound and len(self.stacks) < STACK_DUMPS:
                names = {t.ident: t.name for t in threading.enumerate()}
                self.stacks.append((rss, {names.get(ident, str(ident)): traceback.format_stack(frame)[-6:]
                                          for ident, frame in sys._current_frames().items()
                                          if ident != threading.get_ident()}))
            time.sleep(SAMPLE_S)


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--case", required=True, help="a part in benchmarks/parts, without .stl")
    parser.add_argument("--px", type=float, default=0.05, help="pixel and layer, mm")
    parser.add_argument("--freq-ghz", type=float, default=140.0)
    parser.add_argument("--focal-length-mm", type=float)
    parser.add_argument("--sequential", action="store_true", help="rules and optics in order, not side by side")
    parser.add_argument("--stacks-above-mb", type=float)
    args = parser.parse_args(argv)

    from services import catalogue
    from services.intake import read_part
    from services.report import build_report
    from services.settings import CheckSettings, OpticsSettings

    printer = replace(catalogue.printer("bay1-lcd-resin"), pixel_mm=args.px, layer_height_mm=args.px)
    settings = CheckSettings(optics=OpticsSettings(freqs_ghz=(args.freq_ghz,), focal_length_mm=args.focal_length_mm))
    data = (PARTS_DIR / f"{args.case}.stl").read_bytes()
    began: list[tuple[float, str]] = []

    def progress(stage: str, fraction: float) -> None:
        if not began or began[-1][1] != stage:
            began.append((time.perf_counter(), stage))

    sampler = Sampler(args.stacks_above_mb)
    start = time.perf_counter()
    sampler.start()
    part = read_part(data, name=f"{args.case}.stl", units="mm")
    began.append((time.perf_counter(), "(read)"))
    report = build_report(part=part, printer=printer, material=catalogue.material("standard-resin"),
                          settings=settings, progress=progress, concurrent_stages=not args.sequential)
    sampler.done.set()
    sampler.join()
    wall = time.perf_counter() - start

    t, rss, used, free = max(sampler.samples, key=lambda s: s[1])
    print(f"{args.case} at {args.px * 1000:.0f} um, {'in order' if args.sequential else 'side by side'}: "
          f"wall {wall:.1f} s; peak resident {rss:.0f} MB at {t - start:.2f} s "
          f"(in use {used:.0f} MB, held free {free:.0f} MB)")
    print("stages began (s):", ", ".join(f"{stage} {at - start:.2f}" for at, stage in began))
    every = max(1, round(0.5 / SAMPLE_S))
    print("timeline, s: resident / in use / held free MB")
    print("  " + "  ".join(f"{s[0] - start:.1f}: {s[1]:.0f}/{s[2]:.0f}/{s[3]:.0f}" for s in sampler.samples[::every]))
    print("stage timings (s):", report.timings_s)
    for rss_mb, threads in sampler.stacks:
        print(f"--- resident {rss_mb:.0f} MB")
        for name, lines in threads.items():
            print(f"  [{name}]")
            print("".join("    " + line.strip().replace("\n", " | ") + "\n" for line in lines), end="")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
