"""The raster tools against scipy's binary morphology (a general-purpose reference library)."""

import numpy as np
import pytest
from scipy import ndimage

from services.rules import raster


def structure(diameter):
    """Return the disk as a scipy structuring element: odd-sized, offset (0, 0) at its centre."""
    rows = raster.disk_rows(diameter)
    reach = max(max(abs(dy), abs(a), abs(b)) for dy, a, b in rows)
    st = np.zeros((2 * reach + 1, 2 * reach + 1), bool)
    for dy, a, b in rows:
        st[dy + reach, a + reach:b + reach + 1] = True
    return st


@pytest.mark.parametrize("diameter", range(1, 13))
def test_disk_morphology_matches_scipy(diameter):
    """Exact erosion and dilation equal scipy.ndimage's with the same disk, whatever lies beyond the edge."""
    rng = np.random.default_rng(diameter)
    mask = ndimage.binary_opening(rng.random((70, 90)) < 0.75, np.ones((2, 2)))
    st = structure(diameter)
    for outside in (False, True):
        ref = ndimage.binary_erosion(mask, st, border_value=int(outside))
        assert np.array_equal(raster.erode_disk(mask, diameter, outside=outside), ref)
    assert np.array_equal(raster.dilate_disk(mask, diameter), ndimage.binary_dilation(mask, st))


@pytest.mark.parametrize("diameter", range(1, 15))
def test_a_disk_spans_its_diameter_and_fits_walls_as_wide(diameter):
    """A disk of N pixels is N across, and an opening keeps a wall N wide and removes one N - 1 wide."""
    rows = raster.disk_rows(diameter)
    assert max(b for _, _, b in rows) - min(a for _, a, _ in rows) + 1 == diameter
    assert max(dy for dy, _, _ in rows) - min(dy for dy, _, _ in rows) + 1 == diameter
    for width in (diameter - 1, diameter) if diameter > 1 else (1,):
        mask = np.zeros((60, 60), bool)
        mask[5:55, 20:20 + width] = True
        assert raster.open_disk(mask, diameter)[30, 20:20 + width].all() == (width >= diameter)
