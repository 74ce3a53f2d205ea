"""Zeroth-order effective permittivity of a subwavelength mix of one material and air.

``fill`` is the volume (area) fraction of the material; air (eps = 1) fills the rest. Every
formula is exact at fill 0 and fill 1, so solid and empty cells come out exactly.
"""

from __future__ import annotations

import numpy as np

MODELS = ("rytov_parallel", "rytov_perpendicular", "maxwell_garnett_2d", "bruggeman_2d")

# Default for a 2-D pattern seen at normal incidence (E in the layer plane, across pillars and
# holes running along the axis). Symmetric Bruggeman treats pillars and holes alike, stays inside
# the Wiener bounds and was the closest of these models to RCWA on a pillar lattice
# (tests/services/optics/test_rcwa_crosscheck.py records the error).
DEFAULT_MODEL = "bruggeman_2d"


def rytov_parallel(fill, eps):
    """Return eps for E along 1-D lines: f eps + (1 - f), the upper Wiener bound (Rytov 1956)."""
    return fill * eps + (1 - fill)


def rytov_perpendicular(fill, eps):
    """Return eps for E across 1-D lines: 1 / (f / eps + 1 - f), the lower Wiener bound (Rytov 1956)."""
    return 1.0 / (fill / eps + (1 - fill))


def maxwell_garnett_2d(fill, eps, host=1.0):
    """Return eps of parallel cylinders (fill fraction f) in a host, E across their axes.

    eps_eff = eps_h [(1 + f) eps_i + (1 - f) eps_h] / [(1 - f) eps_i + (1 + f) eps_h]
    (Maxwell Garnett 1904; Choy, Effective Medium Theory, 1999).
    """
    return host * ((1 + fill) * eps + (1 - fill) * host) / ((1 - fill) * eps + (1 + fill) * host)


def bruggeman_2d(fill, eps):
    """Return the symmetric 2-D Bruggeman eps: f (eps - e)/(eps + e) + (1 - f)(1 - e)/(1 + e) = 0.

    The positive root of e^2 - (2f - 1)(eps - 1) e - eps = 0 (Bruggeman 1935; Choy 1999); it is
    complex-valued for a lossy eps, taking the root with positive real part.
    """
    b = (2 * fill - 1) * (eps - 1)
    root = np.sqrt(b * b + 4 * eps + 0j)
    e = (b + root) / 2
    return e if np.iscomplexobj(eps) else e.real


def effective_permittivity(fill, eps, model: str = DEFAULT_MODEL):
    """Return the effective eps of a material of permittivity eps at fill fraction ``fill``."""
    if model == "rytov_parallel":
        return rytov_parallel(fill, eps)
    if model == "rytov_perpendicular":
        return rytov_perpendicular(fill, eps)
    if model == "maxwell_garnett_2d":
        return maxwell_garnett_2d(fill, eps)
    if model == "bruggeman_2d":
        return bruggeman_2d(fill, eps)
    raise ValueError(f"unknown effective-medium model {model!r}")
