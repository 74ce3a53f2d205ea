"""Zeroth-order effective permittivity against the reference values of Rytov and Maxwell Garnett."""

import numpy as np
import pytest

from services.optics.effective_medium import (
    MODELS, bruggeman_2d, effective_permittivity, maxwell_garnett_2d, rytov_parallel, rytov_perpendicular,
)


@pytest.mark.parametrize(("eps", "fill", "par", "perp", "mg"), [
    # shared/references/optics.md section 7 table [C]: Rytov 1956 / Born & Wolf 15.5.2; Maxwell Garnett 1904 / Choy 1999
    (2.8, 0.5, 1.90000, 1.47368, 1.62069),
    (2.8, 0.3, 1.54000, 1.23894, 1.33129),
    (11.68, 0.5, 6.34000, 1.84227, 2.45504),
])
def test_it_matches_rytov_and_maxwell_garnett(eps, fill, par, perp, mg):
    """Rytov's two zeroth-order forms and 2-D Maxwell Garnett reproduce the tabulated values."""
    assert rytov_parallel(fill, eps) == pytest.approx(par, abs=5e-6)
    assert rytov_perpendicular(fill, eps) == pytest.approx(perp, abs=5e-6)
    assert maxwell_garnett_2d(fill, eps) == pytest.approx(mg, abs=5e-6)


def test_matching_layer_fill_fractions_from_the_reference():
    """Fills giving eps_eff = n = 1.67332 for eps 2.8: 0.3741 (TE), 0.6259 (TM), 0.5317 (MG) (optics.md 2.2 [C])."""
    n = np.sqrt(2.8)
    assert rytov_parallel(0.3741, 2.8) == pytest.approx(n, abs=1e-4)
    assert rytov_perpendicular(0.6259, 2.8) == pytest.approx(n, abs=1e-4)
    assert maxwell_garnett_2d(0.5317, 2.8) == pytest.approx(n, abs=1e-4)


@pytest.mark.parametrize("model", MODELS)
def test_every_model_is_exact_for_solid_and_empty_cells(model):
    """Fill 0 is air and fill 1 is the material, lossy or not, so solid regions stay exact."""
    eps = 2.8 * (1 - 0.02j)
    assert effective_permittivity(np.array([0.0, 1.0]), eps, model) == pytest.approx([1.0, eps], abs=1e-12)


def test_bruggeman_stays_inside_the_wiener_bounds_and_is_symmetric():
    """Bruggeman 2-D lies between the Wiener bounds (any geometry) and gives sqrt(eps) at fill 1/2 (Choy 1999)."""
    fill = np.linspace(0, 1, 101)
    b = bruggeman_2d(fill, 2.8)
    assert np.all(b <= rytov_parallel(fill, 2.8) + 1e-12)
    assert np.all(b >= rytov_perpendicular(fill, 2.8) - 1e-12)
    assert bruggeman_2d(0.5, 2.8) == pytest.approx(np.sqrt(2.8), abs=1e-12)
    # Swapping host and inclusion leaves it unchanged: eps_eff(f; eps, 1) = eps * eps_eff(1 - f; 1/eps, 1).
    assert 2.8 * bruggeman_2d(1 - fill, 1 / 2.8) == pytest.approx(b, rel=1e-12)
