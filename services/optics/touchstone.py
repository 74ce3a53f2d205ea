"""The part as a two-port between free-space ports, written as a Touchstone file by scikit-rf."""

from __future__ import annotations

import numpy as np

ETA0_OHM = 376.730313668  # free-space wave impedance, the port reference

HEADER = ("Phasewright: predicted plane-wave two-port of the printed part, illumination-weighted. "
          "|S| from the weighted power, phase from the weighted mean. Ports: free space on the input "
          "face (port 1) and beyond the far extreme (port 2). e^{+j omega t} convention.")


def touchstone_s2p(freqs_ghz, s11, s21, s22, *, name: str) -> str:
    """Return the text of a .s2p file (Touchstone 1.0, real/imaginary, referenced to eta0)."""
    import skrf

    s = np.empty((len(freqs_ghz), 2, 2), dtype=complex)
    s[:, 0, 0], s[:, 1, 0], s[:, 0, 1], s[:, 1, 1] = s11, s21, s21, s22  # reciprocal: S12 = S21
    freq = skrf.Frequency.from_f(np.asarray(freqs_ghz, dtype=float), unit="GHz")
    net = skrf.Network(frequency=freq, s=s, z0=ETA0_OHM, name=name, comments=HEADER)
    return net.write_touchstone(return_string=True, skrf_comment=False, form="ri")
