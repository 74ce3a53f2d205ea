"""Time a rigorous cell table on first use and from the cache; record orders and convergence.

    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_cell_tables.py [pillar|hole]

One material (eps 2.8, tan delta 0.03), square lattice of period 0.5 mm, 1 mm base, 7 frequencies
270-330 GHz, 40 fills x 16 heights (0.25-4 mm). Prints wall and CPU seconds: the machine is shared,
so CPU time is the steadier number. The cache goes to a fresh temporary folder.
"""

from __future__ import annotations

import json
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from services.optics.cell_tables import TableSpec, cell_table  # noqa: E402


def main(kind: str = "pillar") -> dict:
    eps = 2.8 * (1 - 0.03j)
    freqs = (270.0, 280.0, 290.0, 300.0, 310.0, 320.0, 330.0)
    spec = TableSpec(freqs_ghz=freqs, eps=(eps,) * len(freqs), period_mm=0.5, kind=kind, base_mm=1.0,
                     heights_mm=tuple(float(h) for h in np.linspace(0.25, 4.0, 16)))
    with tempfile.TemporaryDirectory() as folder:
        w0, c0 = time.perf_counter(), time.process_time()
        table = cell_table(spec, folder=Path(folder))
        w1, c1 = time.perf_counter(), time.process_time()
        cached = cell_table(spec, folder=Path(folder))
        w2 = time.perf_counter()
    out = {"kind": kind, "first_use_wall_s": round(w1 - w0, 2), "first_use_cpu_s": round(c1 - c0, 2),
           "cached_wall_s": round(w2 - w1, 4), "cached_source": cached.source.split()[0],
           "peak_rss_mb": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024),
           **{k: v for k, v in table.to_dict().items() if k in ("terms", "convergence", "equivalent_layer_error")}}
    print(json.dumps(out, indent=1))
    return out


if __name__ == "__main__":
    main(*sys.argv[1:2])
