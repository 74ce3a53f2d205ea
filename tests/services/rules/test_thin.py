"""Widths across walls at any angle, and the windows that stay inside the array (services.rules.thin)."""

import math

import numpy as np
import pytest

from services.rules import raster, thin


def band(width_px: float, angle_deg: float, n: int = 120, shift: float = 0.137) -> np.ndarray:
    """Return a straight wall width_px wide and 80 px long turned by angle_deg, sampled at pixel centres."""
    yy, xx = np.mgrid[0:n, 0:n] + 0.5
    t, c = math.radians(angle_deg), n / 2 + shift
    across = (xx - c) * math.cos(t) + (yy - c) * math.sin(t)
    along = -(xx - c) * math.sin(t) + (yy - c) * math.cos(t)
    return (np.abs(across) < width_px / 2) & (np.abs(along) < 40)


def widths_in_the_middle(mask: np.ndarray, cap_px: int) -> np.ndarray:
    """Return the width at every material pixel within 25 px of the middle (away from the wall's ends)."""
    _, numbers = raster.nearest_void(mask)
    yy, xx = np.mgrid[0:mask.shape[0], 0:mask.shape[1]]
    rows, cols = np.nonzero(mask & (np.hypot(yy - 60, xx - 60) < 25))
    near = raster.void_index(mask, numbers[rows, cols])
    return thin.widths_across(mask, rows, cols, near, cap_px)


@pytest.mark.parametrize("width_px", [4.0, 6.0, 9.0])
@pytest.mark.parametrize("angle_deg", [0.0, 7.0, 25.0, 30.0, 45.0, 60.0, 83.0])
def test_a_wall_at_the_limit_reads_its_drawn_width_within_half_a_pixel_at_any_angle(width_px, angle_deg):
    """Every pixel of a wall drawn at the limit reads no less than half a pixel under it (by construction).

    Widths over the limit (``cap_px``) come back as cap_px + 1, so the reading is at most that.
    """
    widths = widths_in_the_middle(band(width_px, angle_deg), cap_px=int(width_px))
    assert widths.size > 100
    assert widths.min() >= width_px - 0.5 and widths.max() <= width_px + 1
    assert abs(np.median(widths) - width_px) <= 0.36  # at 45 deg pixel centres lie on lines 0.707 px apart


@pytest.mark.parametrize("angle_deg", [0.0, 25.0, 45.0, 60.0])
def test_at_the_limit_passes_and_a_pixel_under_is_flagged_everywhere(angle_deg):
    """The rules' convention: widths rounded to whole pixels, under the whole-pixel limit to count."""
    assert not thin.is_under(widths_in_the_middle(band(6.0, angle_deg), 6), 6).any()
    assert thin.is_under(widths_in_the_middle(band(5.0, angle_deg), 6), 6).all()


@pytest.mark.parametrize("angle_deg", [0.0, 10.0, 25.0, 60.0, 90.0])
def test_edge_normals_follow_a_turned_edge(angle_deg):
    """The smoothed gradient at the void pixels along a straight edge points across it: within 15 deg, 9 on average."""
    mask = band(40.0, angle_deg)
    rows, cols = np.nonzero(~mask & (np.hypot(*(np.mgrid[0:120, 0:120] - 60)) < 30))
    touching = np.array([mask[max(r - 1, 0):r + 2, max(c - 1, 0):c + 2].any() for r, c in zip(rows, cols)])
    uy, ux = thin.edge_normals(mask, rows[touching], cols[touching])
    t = math.radians(angle_deg)
    cosine = np.abs(uy * math.sin(t) + ux * math.cos(t))  # the wall's normal is (cos t, sin t) in (x, y)
    error_deg = np.degrees(np.arccos(np.clip(cosine, 0.0, 1.0)))
    assert cosine.size > 20 and error_deg.max() <= 15.0 and error_deg.mean() <= 9.0


def test_windows_at_the_array_edge_are_cut_back_never_empty():
    """A window reaching past any edge keeps what is inside (issue 14's empty reduction at an edge)."""
    assert thin.clamp_box((10, 8), 0, 0, 2, 3) == (0, 4, 0, 4)
    assert thin.clamp_box((10, 8), 9, 7, 2, 3) == (7, 10, 5, 8)
    assert thin.clamp_box((10, 8), -1, -1, 2, 3) == (0, 3, 0, 3)
    assert thin.clamp_box((10, 8), 20, 20, 2, 3) == (9, 10, 7, 8)


def test_first_pixel_of_each_label():
    labels = np.array([[0, 2, 2], [1, 0, 2], [1, 3, 0]])
    assert raster.first_pixel(labels, np.array([1, 2, 3])).tolist() == [3, 1, 7]


@pytest.mark.parametrize("width", [1, 2, 3, 4, 7, 8])
def test_a_square_wall_reads_its_pixel_count_at_every_pixel(width):
    """Square to the grid, every pixel of a wall reads its pixel count, odd or even (by construction)."""
    mask = np.zeros((40, 40), bool)
    mask[5:35, 10:10 + width] = True
    rows, cols = raster.coords(mask[10:30])
    rows = rows + 10
    _, numbers = raster.nearest_void(mask)
    near = raster.void_index(mask, numbers[rows, cols])
    assert np.all(np.abs(thin.widths_across(mask, rows, cols, near, 20) - width) <= 1e-6)
    assert np.all(np.abs(thin.widths_across(mask, rows, cols, near, width) - width) <= 0.05)  # refined at the limit


def test_more_lines_than_opencv_remaps_at_once_and_a_wall_wider_than_it_reads():
    """OpenCV's remap refuses maps or images of 32,767 rows or columns or more (SHRT_MAX, its assertion in
    imgwarp.cpp): a 100 mm zoned lens at 25 um asked for more near-limit lines than that and the check stopped.
    A 5 px wall 40,000 px long, measured across from 39,980 void pixels beside it, reads 5 px everywhere."""
    mask = np.zeros((12, 40_000), bool)
    mask[4:9] = True
    vx = np.arange(10, 39_990)  # the wall's ends at the array's edge blur: away from them
    vy = np.full(vx.size, 3)
    width = thin._edge_to_edge(mask, vy, vx, np.ones(vx.size), np.zeros(vx.size), 6)
    assert width.shape == (39_980,)
    np.testing.assert_allclose(width, 5.0, atol=0.25)


def test_edge_normals_across_tiles_match_scipy_filtering_the_whole_mask():
    """Points spread over many filter tiles get the normals of one Gaussian-derivative filter over the whole mask
    (scipy.ndimage.correlate1d in double precision, void beyond the edge), to single precision."""
    from scipy import ndimage

    rng = np.random.default_rng(11)
    mask = ndimage.binary_opening(rng.random((1300, 1700)) < 0.55, np.ones((3, 3)))
    rows, cols = np.nonzero(mask ^ ndimage.binary_erosion(mask))
    pick = rng.choice(rows.size, 20000, replace=False)
    rows, cols = rows[pick], cols[pick]
    d = np.arange(-thin._REACH, thin._REACH + 1, dtype=np.float64)
    g = np.exp(-0.5 * (d / thin.SIGMA_PX) ** 2)
    g /= g.sum()
    dg = d / thin.SIGMA_PX ** 2 * g
    image = mask.astype(np.float64)
    gy = ndimage.correlate1d(ndimage.correlate1d(image, g, axis=1, mode="constant"), dg, axis=0, mode="constant")
    gx = ndimage.correlate1d(ndimage.correlate1d(image, dg, axis=1, mode="constant"), g, axis=0, mode="constant")
    gy, gx = gy[rows, cols], gx[rows, cols]
    norm = np.hypot(gy, gx)
    ok = norm > 1e-3
    uy, ux = thin.edge_normals(mask, rows, cols)
    assert ok.mean() > 0.95 and np.ptp(rows) > 2 * thin.NORMAL_TILE_PX and np.ptp(cols) > 2 * thin.NORMAL_TILE_PX
    assert np.allclose(uy[ok], gy[ok] / norm[ok], atol=1e-5) and np.allclose(ux[ok], gx[ok] / norm[ok], atol=1e-5)


def _walked(mask, vy, vx, uy, ux, cap_px):
    """One line at a time, one sample at a time, as the convention states it: nearest pixel t = 1, 2, ... along the
    line (beyond the array void); material must be met within three samples; the width is the run of material
    samples up to the next void one, over cap_px counting as cap_px + 1."""
    ny, nx = mask.shape
    widths, met = [], []
    for y, x, dy, dx in zip(vy, vx, uy, ux):
        samples = []
        for t in range(1, 2 * cap_px + 4):
            r, c = int(np.rint(y + t * dy)), int(np.rint(x + t * dx))
            samples.append(bool(0 <= r < ny and 0 <= c < nx and mask[r, c]))
        entry = next((i for i in range(3) if samples[i]), None)
        met.append(entry is not None)
        run = 0
        if entry is not None:
            while entry + run < len(samples) and samples[entry + run] and run <= cap_px:
                run += 1
        widths.append(float(min(run, cap_px + 1)) if entry is not None else float(cap_px + 1))
    return np.array(widths), np.array(met)


def test_the_sampled_width_is_the_run_of_material_met_along_each_line():
    """The lines sampled all at once (thin._march) give, line for line, what walking each one sample by sample
    gives, on random masks, points (some outside the array) and directions (some vanishing)."""
    rng = np.random.default_rng(11)
    for _ in range(60):
        ny, nx = (int(v) for v in rng.integers(5, 60, 2))
        mask = rng.random((ny, nx)) < rng.uniform(0.2, 0.9)
        n = int(rng.integers(1, 120))
        vy, vx = rng.integers(-3, ny + 3, n), rng.integers(-3, nx + 3, n)
        angle = rng.uniform(0, 2 * np.pi, n)
        uy, ux = np.sin(angle), np.cos(angle)
        uy[rng.random(n) < 0.1] = 0.0
        cap = int(rng.integers(1, 10))
        width, met = thin._march(mask, vy, vx, uy, ux, cap)
        ref_width, ref_met = _walked(mask, vy, vx, uy, ux, cap)
        assert np.array_equal(met, ref_met) and np.array_equal(width, ref_width)


@pytest.mark.parametrize("of_void", [False, True])
def test_widths_measured_in_parts_equal_one_measurement_over_the_whole_array(monkeypatch, of_void):
    """Candidates spread over the whole array (rings of every width, as a zoned lens's zones, and thin speckle) are
    measured in small crops when their box is large; each crop holds what its candidates' measurement reads, so
    the widths and depths equal a distance map and a width search over the whole array, with no crop at all."""
    yy, xx = np.mgrid[0:400, 0:420] + 0.5
    radius = np.hypot(yy - 190.3, xx - 214.7)
    mask = (np.sin(radius / 2.5) + 0.3 * np.sin(xx / 5.0) > 0.2) & (radius < 185)
    mask |= np.random.default_rng(5).random(mask.shape) < 0.01
    mask = ~mask if of_void else mask
    padded = np.pad(mask, 2)  # void beyond the edge counts (the scan's frame has a void margin)
    cap = 9
    rows, cols = raster.coords(padded & ~raster.open_disk(padded, cap))
    assert rows.size > 5000 and np.ptp(rows) > 300 and np.ptp(cols) > 300
    dist, numbers = raster.nearest_void(padded)
    whole_width = thin.widths_across(padded, rows, cols, raster.void_index(padded, numbers[rows, cols]), cap)
    whole_depth = dist[rows, cols]
    monkeypatch.setattr(thin, "EDGE_CROP_MAX_PX", 50 * 50)  # parts of a few dozen candidates each
    width, depth = thin.widths_at(padded, rows, cols, cap)
    np.testing.assert_array_equal(depth, whole_depth)
    # Only float32 rounding differs: the edge search's sample positions are single precision from the crop's
    # corner (a spacing of 3e-5 px at 400 px), and the filters' sums follow a crop's column start (1e-8).
    np.testing.assert_allclose(width, whole_width, rtol=0, atol=1e-4)
    assert np.count_nonzero(thin.is_under(width, cap) != thin.is_under(whole_width, cap)) == 0
    none = np.zeros(0, np.int64)
    assert [a.size for a in thin.widths_at(padded, none, none, cap)] == [0, 0]  # no candidates: nothing measured
