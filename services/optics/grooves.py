"""A generated window's grooves solved whole: the rigorous reference the report sets beside the check's cells.

The check reads a declared groove layer cell by cell through equivalent layers (``lamellar.GrooveTable``), which
cannot hold what couples the window's two faces through its core near the no-diffraction limit: there the
first orders in the core are only just cut off. The window as designed (its declared fill, depth, core and
period) is solved here as one lamellar stack in every order, and the difference from the check's own
as-designed figures is reported, so a designer sees both the number and how far the cell model is from it.
"""

from __future__ import annotations

import numpy as np

from services.optics import lamellar
from services.optics.materials import RFValues

# Past these differences from the whole solution, the report's note says the cell model's figures are off.
R_NOTE_POINTS, T_NOTE_POINTS = 0.25, 1.0


def declared_grooves(params: dict | None) -> bool:
    """Return True for a part whose generator declared a window with groove matching layers."""
    p = params or {}
    return p.get("matching") == "grooves" and p.get("groove_field") in lamellar.POLARISATIONS and all(
        isinstance(p.get(k), int | float) for k in ("fill", "depth_mm", "thickness_mm", "period_mm"))


def whole_window(params: dict, rf: RFValues, as_designed: dict) -> dict:
    """Return the designed window's reflectance and transmittance at each frequency, solved whole, and their
    differences from the check's as-designed ``power_reflection`` and ``power_transmission`` (in points)."""
    rows = []
    for f, e in zip(rf.freqs_ghz, rf.eps):
        face = lamellar.Grating(complex(e), float(params["fill"]), float(params["depth_mm"]))
        rows.append(lamellar.zero_order([face, lamellar.Uniform(complex(e), float(params["thickness_mm"])), face],
                                        period_mm=float(params["period_mm"]), freq_ghz=float(f),
                                        polarisation=params["groove_field"]))
    reflectance = np.array([r.reflectance for r in rows])
    transmittance = np.array([r.transmittance for r in rows])
    d_r = 100 * (np.asarray(as_designed["power_reflection"], dtype=float) - reflectance)
    d_t = 100 * (np.asarray(as_designed["power_transmission"], dtype=float) - transmittance)
    return {"how": f"the designed window (grooves, core, grooves) as one lamellar stack, {lamellar.ORDERS} orders, "
                   "Fourier modal method",
            "power_reflection": [round(float(v), 6) for v in reflectance],
            "power_transmission": [round(float(v), 6) for v in transmittance],
            # (+ 0.0: a difference that rounds to nothing reads 0.0, not -0.0)
            "cell_model_minus_whole_points": {"power_reflection": [round(float(v), 2) + 0.0 for v in d_r],
                                              "power_transmission": [round(float(v), 1) + 0.0 for v in d_t]},
            "cell_model_off": bool(np.any(np.abs(d_r) > R_NOTE_POINTS) or np.any(np.abs(d_t) > T_NOTE_POINTS))}


def note_sentence(name: str, whole: dict, freqs_ghz) -> str | None:
    """Return the note's sentence where the cell model is off the whole solution, else None."""
    if not whole["cell_model_off"]:
        return None
    d_r = np.abs(whole["cell_model_minus_whole_points"]["power_reflection"])
    d_t = np.abs(whole["cell_model_minus_whole_points"]["power_transmission"])
    i = int(np.argmax(np.maximum(d_r / R_NOTE_POINTS, d_t / T_NOTE_POINTS)))
    return (f"{name}: at {float(freqs_ghz[i]):g} GHz the designed window, solved whole, reflects "
            f"{100 * whole['power_reflection'][i]:.2f} % and transmits {100 * whole['power_transmission'][i]:.1f} %; "
            f"the check's cells differ by {d_r[i]:.2f} and {d_t[i]:.1f} points there (their equivalent layers miss "
            "how the two faces couple through the core near the no-diffraction limit; they also hold the print's "
            "pixel and layer steps and any ring closing the grooves at the rim). Read the whole solution "
            "(analysis.grooves_whole_window) for the design; the cells' figures for what the print changes.")
