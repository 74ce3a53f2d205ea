"""Reflectance and transmittance of a grooved window from RCWA (inkstone, PyPI), run as a child process.

    python lamellar_reference.py '{"period_mm": ..., "ridge_mm": ..., "depth_mm": ..., "core_mm": ...,
                                   "eps_r": ..., "tan_delta": ..., "field": "along" | "across",
                                   "orders": 101, "freqs_ghz": [...]}'   -> JSON [[R, T], ...]

The window: a lamellar layer (ridges of the material, ``ridge_mm`` wide and centred, in air), the core, the same
lamellar layer, air on both sides, normal incidence; "along" puts the electric field along the ridges
(s-polarised for inkstone's 1-D lattice along x), "across" across them (p-polarised). ``core_mm`` 0 with
"face": true gives one face into the bulk material instead (R only, T reported as NaN). A child process so
OPENBLAS_NUM_THREADS=1 takes effect before numpy loads (see rcwa_reference.py).
"""

from __future__ import annotations

import json
import sys
import warnings

import numpy as np

C_MM_GHZ = 299.792458


def powers(spec: dict, freq_ghz: float) -> tuple[float, float]:
    from inkstone import Inkstone

    s = Inkstone()
    s.lattice = spec["period_mm"]
    s.num_g = spec["orders"]
    s.frequency = freq_ghz / C_MM_GHZ
    s.AddMaterial(name="di", epsilon=spec["eps_r"] * (1 + 1j * spec["tan_delta"]))  # inkstone: e^{-i omega t}
    s.AddLayer(name="in", thickness=0, material_background="vacuum")
    s.AddLayer(name="g1", thickness=spec["depth_mm"], material_background="vacuum")
    s.AddPattern1D(layer="g1", material="di", width=spec["ridge_mm"], center=0)
    face = spec.get("face", False)
    if face:
        s.AddLayer(name="out", thickness=0, material_background="di")
    else:
        s.AddLayer(name="core", thickness=spec["core_mm"], material_background="di")
        s.AddLayerCopy(name="g2", original_layer="g1", thickness=spec["depth_mm"])
        s.AddLayerCopy(name="out", original_layer="in", thickness=0)
    along = spec["field"] == "along"
    s.SetExcitation(theta=0, phi=0, s_amplitude=1 if along else 0, p_amplitude=0 if along else 1)
    forward, backward = s.GetPowerFlux("in")
    reflectance = float(np.real(-backward / forward))
    if face:
        return reflectance, float("nan")
    through, _ = s.GetPowerFlux("out")
    return reflectance, float(np.real(through / forward))


if __name__ == "__main__":
    warnings.simplefilter("ignore", DeprecationWarning)  # inkstone 0.3.15 uses 2-D np.cross
    spec = json.loads(sys.argv[1])
    print(json.dumps([powers(spec, f) for f in spec["freqs_ghz"]]))
