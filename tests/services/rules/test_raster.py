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


@pytest.mark.parametrize("diameter", [*range(1, 13), 17, 24, 31])  # runs of up to 31 pixels: built by doubling
def test_disk_morphology_matches_scipy(diameter):
    """Exact erosion and dilation equal scipy.ndimage's with the same disk, whatever lies beyond the edge."""
    rng = np.random.default_rng(diameter)
    mask = ndimage.binary_opening(rng.random((70, 90)) < 0.75, np.ones((2, 2)))
    st = structure(diameter)
    for outside in (False, True):
        ref = ndimage.binary_erosion(mask, st, border_value=int(outside))
        assert np.array_equal(raster.erode_disk(mask, diameter, outside=outside), ref)
    assert np.array_equal(raster.dilate_disk(mask, diameter), ndimage.binary_dilation(mask, st))


@pytest.mark.parametrize("diameter", [*range(1, 13), 24])
def test_disk_opening_matches_scipy_by_kernel_and_by_packed_words(diameter, monkeypatch):
    """The opening (every disk that fits, beyond the edge ``outside``) equals scipy's erosion then dilation on the
    mask padded with ``outside``, on both of its paths: OpenCV's erode and dilate with the disk as a kernel (small
    layers) and the packed words' shifts (large ones, forced here by a threshold of 0)."""
    rng = np.random.default_rng(100 + diameter)
    mask = ndimage.binary_opening(rng.random((60, 75)) < 0.7, np.ones((2, 2)))
    st, pad = structure(diameter), 2 * max(max(abs(dy), abs(a), abs(b)) for dy, a, b in raster.disk_rows(diameter)) + 2
    for outside in (False, True):
        padded = np.pad(mask, pad, constant_values=outside)
        ref = ndimage.binary_dilation(ndimage.binary_erosion(padded, st, border_value=int(outside)), st)
        ref = ref[pad:-pad, pad:-pad]
        assert np.array_equal(raster.open_disk(mask, diameter, outside=outside), ref)
        monkeypatch.setattr(raster, "SMALL_LAYER_PX", 0)
        assert np.array_equal(raster.open_disk(mask, diameter, outside=outside), ref)
        monkeypatch.undo()


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


@pytest.mark.parametrize("connectivity", [4, 8])
def test_compact_labels_match_scipy_and_fall_back_to_32_bits_past_65535_sections(connectivity):
    """A compact labelling holds the same partition as scipy.ndimage.label (same count, one-to-one labels), in
    16 bits when it fits; 90,000 separate dots do not fit, and come back in 32 bits, all counted."""
    rng = np.random.default_rng(7)
    sparse = ndimage.binary_opening(rng.random((300, 400)) < 0.6, np.ones((2, 2)))
    dots = np.zeros((600, 600), bool)
    dots[::2, ::2] = True  # 90,000 sections, 8- or 4-connected alike
    st = np.ones((3, 3), bool) if connectivity == 8 else None
    for mask, dtype in ((sparse, np.uint16), (dots, np.int32)):
        count, labels = raster.label(mask, connectivity, compact=True)
        ref, n_ref = ndimage.label(mask, structure=st)
        assert labels.dtype == dtype and count == n_ref + 1
        pairs = np.unique(np.column_stack([labels[mask], ref[mask]]), axis=0)
        assert len(pairs) == n_ref and (labels[~mask] == 0).all()


def test_void_index_maps_opencv_pixel_numbers_band_by_band():
    """OpenCV numbers a distance transform's void pixels from 1 in row-major order (its DIST_LABEL_PIXEL
    documentation); the numbers of the nearest void pixels map to where those pixels are, over many row bands."""
    rng = np.random.default_rng(5)
    mask = rng.random((3 * raster.VOID_INDEX_ROWS + 17, 301)) < 0.8
    mask[:, :2] = False
    _, numbers = raster.nearest_void(mask)
    flat = raster.void_index(mask, numbers[mask])
    rows, cols = np.divmod(flat, mask.shape[1])
    assert not mask[rows, cols].any()  # every one is a void pixel...
    dist = ndimage.distance_transform_edt(mask)[mask]
    found = np.hypot(rows - np.nonzero(mask)[0], cols - np.nonzero(mask)[1])
    assert np.abs(found - dist).max() < 0.1  # ...and the nearest (scipy's exact distance; OpenCV's 5x5 mask is near)


@pytest.mark.parametrize("seed", range(6))
def test_holes_filled_and_the_inner_edge_are_scipys(seed):
    """Holes filled and the inner edge give scipy.ndimage's binary_fill_holes and mask & ~binary_erosion (default
    cross structure, outside the array void) pixel for pixel: random blobs, rings round holes, holes open to the
    border, diagonal gaps (closed to 4-connected void), an empty and a full mask."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:67, :91]
    mask = ndimage.binary_opening(rng.random((67, 91)) < 0.55)
    mask |= (np.hypot(yy - 30, xx - 40) < 20) & ~(np.hypot(yy - 30, xx - 40) < 5 + seed)
    mask[:, :3] = seed % 2 == 0  # a band along the border, solid or void
    mask[10:14, 70:74] = np.eye(4, dtype=bool) | np.eye(4, dtype=bool)[::-1]  # a diagonal cross
    for m in (mask, np.zeros_like(mask), np.ones_like(mask), ~mask):
        np.testing.assert_array_equal(raster.holes_filled(m), ndimage.binary_fill_holes(m))
        np.testing.assert_array_equal(raster.inner_edge(m), m & ~ndimage.binary_erosion(m))
