"""Zero-order transmission of a pillar lattice from RCWA (inkstone, PyPI), run as a child process.

    python rcwa_reference.py PERIOD_MM RADIUS_MM [RADIUS_MM ...]   -> JSON [[T, re t, im t], ...]

Environment RCWA_ORDERS (default 101) sets inkstone's number of orders, RCWA_KIND=hole makes the
discs air in the material instead of material in air.

A child process so OPENBLAS_NUM_THREADS=1 takes effect before numpy loads: threaded BLAS on small
matrices ran 10-30x slower on the 2-core machine (shared/references/optics.md section 12).
The structure: 2 mm pillars of eps 2.8 / tan delta 0.02 on a 1 mm base, 100 GHz, normal incidence, s-polarised.
"""

from __future__ import annotations

import json
import sys
import warnings

import numpy as np

LAM = 299.792458 / 100.0


def zero_order(period_mm: float, radius_mm: float, orders: int = 101, kind: str = "pillar") -> tuple[float, complex]:
    """Return (T, t) with t converted to e^{+j omega t} (optics.md section 12.3 recipe)."""
    from inkstone import Inkstone

    s = Inkstone()
    s.lattice = ((period_mm, 0), (0, period_mm))
    s.num_g = orders
    s.frequency = 1 / LAM
    s.AddMaterial(name="di", epsilon=2.8 * (1 + 0.02j))  # inkstone: e^{-i omega t}, loss is +Im
    s.AddLayer(name="in", thickness=0, material_background="vacuum")
    pillar = kind == "pillar"
    s.AddLayer(name="pil", thickness=2.0, material_background="vacuum" if pillar else "di")
    s.AddPatternDisk(layer="pil", material="di" if pillar else "vacuum", radius=radius_mm)
    s.AddLayer(name="base", thickness=1.0, material_background="di")
    s.AddLayerCopy(name="out", original_layer="in", thickness=0)
    s.SetExcitation(theta=0, phi=0, s_amplitude=1, p_amplitude=0)
    fi, _ = s.GetPowerFlux("in")
    fo, _ = s.GetPowerFlux("out")
    ai = s.GetAmplitudesByOrder(layer="in", z=0, order=(0, 0))
    ao = s.GetAmplitudesByOrder(layer="out", z=0, order=(0, 0))
    t = np.ravel(ao[2])[0] / np.ravel(ai[2])[0]  # index 2: Ey forward
    return float(np.real(np.ravel(fo / fi)[0])), complex(np.conj(t))


if __name__ == "__main__":
    warnings.simplefilter("ignore", DeprecationWarning)  # inkstone 0.3.15 uses 2-D np.cross
    period = float(sys.argv[1])
    out = []
    import os

    for r in sys.argv[2:]:
        T, t = zero_order(period, float(r), int(os.environ.get("RCWA_ORDERS", "101")),
                          os.environ.get("RCWA_KIND", "pillar"))
        out.append([T, t.real, t.imag])
    print(json.dumps(out))
