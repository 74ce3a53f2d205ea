"""The split-step march through the part: slab transmission, refraction at a tilted face, sub-cells."""

import numpy as np
import pytest
from scipy import fft as sfft

from services.layers import LayerStack, build_layer_stack
from services.optics import cells as cell_counting
from services.optics.cells import CellGrid, cell_runs
from services.optics.materials import rf_values, wavelength_mm
from services.optics.multislice import Beam, Window
from services.optics.transfer import slab_airy
from services.optics.transmission import cell_sparams
from tests.services.optics.helpers import box, material, part_from

FREQS = np.array([75.0, 90.0, 110.0])
# Airy / Fabry-Perot formula (Born & Wolf 7.6), computed in shared/references/optics.md section 2.3 [C]
SLAB_T = np.array([0.750801, 0.866972, 0.678039])


def _beam(grid: CellGrid, sub: int, half_mm: tuple[float, float], freq_max_ghz: float, n: float) -> Beam:
    """A flat-topped beam, +-half_mm (x, y) about the axis, with soft (super-Gaussian) edges on the sub-cells.

    Soft edges, because a hard edge's Fresnel ripple falls off only as 1 / distance.
    """
    fine = grid.subdivided(sub)
    field = np.exp(-((fine.x_mm[None, :] / half_mm[0]) ** 8 + (fine.y_mm[:, None] / half_mm[1]) ** 8))
    lam = float(wavelength_mm(freq_max_ghz))
    return Beam(field.astype(complex), grid, sub, lam / (3 * n), lam)


@pytest.mark.parametrize("sub", [1, 3])
def test_a_slab_passes_its_airy_transmission_to_the_exit_field(sub):
    """Through a 2 mm slab (2.8 / 0.02) the exit field is the beam times the Airy t: |t|^2 = 0.750801, 0.866972,
    0.678039 (Born & Wolf 7.6; optics.md 2.3). The beam is a Gaussian of w = 8 mm: over 2 mm it keeps its size
    at the centre and gains the Gouy phase atan(z / z_c), z_c = pi w^2 / lambda (Goldsmith 1998 ch. 2), in air,
    the march's reference medium."""
    part = part_from(box(56.0, 56.0, 2.0), "slab")
    stack = build_layer_stack(part, pixel_mm=0.2, layer_height_mm=0.1)
    grid = CellGrid.around(axis_mm=(0.0, 0.0), half_extent_mm=(26.0, 26.0), cell_mm=0.6)
    fine = grid.subdivided(sub)
    lam = float(wavelength_mm(FREQS.max()))
    beam = Beam(np.exp(-(fine.radius_mm() / 8.0) ** 2) + 0j, grid, sub, lam / (3 * np.sqrt(2.8)), lam)
    sp = cell_sparams(stack, grid, rf_values(material(2.8, 0.02), FREQS), beam=beam)["nominal"]
    centre = grid.radius_mm() < 2.0
    ratio = sp.exit_field[:, centre] / np.exp(-(grid.radius_mm()[centre] / 8.0) ** 2)
    t, _ = slab_airy(2.8, 0.02, 2.0, FREQS)
    gouy = np.arctan(2.0 / (np.pi * 8.0**2 / wavelength_mm(FREQS)))
    assert np.abs(ratio) ** 2 == pytest.approx(np.broadcast_to(SLAB_T[:, None], ratio.shape), abs=2e-3)
    assert ratio == pytest.approx(np.broadcast_to((t * np.exp(1j * gouy))[:, None], ratio.shape), abs=2e-3)
    assert np.all(np.abs(sp.exit_field[:, 0, 0]) < 1e-3)  # the beam has not reached the window's corner


def _wedge(angle_deg: float, n: float) -> LayerStack:
    """A prism across x: 1 mm base, top rising at angle_deg over |x| < 12 mm, 24 mm deep in y."""
    px, layer = 0.1, 0.05
    nx, ny = 320, 240
    x = (np.arange(nx) - nx / 2 + 0.5) * px
    top = 1.0 + (np.clip(x, -12, 12) + 12) * np.tan(np.radians(angle_deg))
    top[np.abs(x) > 14] = 0.0
    layers = int(np.ceil(top.max() / layer))
    masks = [np.broadcast_to(top[None, :] > (k + 0.5) * layer, (ny, nx)) for k in range(layers)]
    return LayerStack.from_masks(masks, pixel_mm=px, layer_height_mm=layer, origin_mm=(-nx / 2 * px, -ny / 2 * px, 0.0))


def test_a_wedge_refracts_by_snells_law_not_by_the_thin_element_rule():
    """A wave leaving a 20 degree face of n = 1.6736 turns by 14.918 deg (Snell, Born & Wolf 1.5.1), where a thin
    phase screen turns it by asin((n - 1) tan 20) = 14.192 deg (computed from the two formulas)."""
    n = 1.6736
    stack = _wedge(20.0, n)
    grid = CellGrid.around(axis_mm=(0.0, 0.0), half_extent_mm=(15.8, 11.8), cell_mm=0.5)
    sp = cell_sparams(stack, grid, rf_values(material(n * n, 0.0), [140.0]),
                      beam=_beam(grid, 1, (11.0, 8.0), 140.0, n))["nominal"]
    row = sp.exit_field[0, grid.axis_index[0]]
    near = (grid.x_mm > -4) & (grid.x_mm < 2)  # above the face, far from the beam's and the wedge's edges
    slope = np.polyfit(grid.x_mm[near], np.unwrap(np.angle(row[near])), 1)[0]
    turned = np.degrees(np.arcsin(-slope * float(wavelength_mm(140.0)) / (2 * np.pi)))  # e^{-j kx x}
    snell = np.degrees(np.arcsin(n * np.sin(np.radians(20.0)))) - 20.0
    assert snell == pytest.approx(14.918, abs=1e-3)
    assert turned == pytest.approx(snell, abs=0.1)
    assert abs(turned - np.degrees(np.arcsin((n - 1) * np.tan(np.radians(20.0))))) > 0.5


def test_sub_cells_leave_the_cells_exactly_as_they_were():
    """Counting pixels on sub-cells and summing them gives the cells' fills and edges bit for bit."""
    part = part_from(box(7.3, 5.1, 0.6).translate((0.37, -0.21, 0.0)), "block")
    stack = build_layer_stack(part, pixel_mm=0.05, layer_height_mm=0.1)
    grid = CellGrid.around(axis_mm=(0.13, 0.02), half_extent_mm=(4.5, 3.5), cell_mm=0.45)
    for plain, fine in zip(cell_runs(stack, grid, with_edges=True), cell_runs(stack, grid, with_edges=True, sub=3)):
        assert np.array_equal(plain.fill, fine.fill) and np.array_equal(plain.edge_mm, fine.edge_mm)
        assert fine.fine_fill.shape == (grid.shape[0] * 3, grid.shape[1] * 3)
        summed = fine.fine_fill.reshape(grid.shape[0], 3, grid.shape[1], 3).mean(axis=(1, 3))
        assert summed == pytest.approx(fine.fill, abs=1e-12)


@pytest.mark.parametrize("sub", [2, 3])
def test_the_cells_sample_the_band_limited_field_at_their_centres(sub):
    """A propagating plane wave on the sub-cells comes back exactly at the cell centres (sampling theorem)."""
    grid = CellGrid.around(axis_mm=(0.0, 0.0), half_extent_mm=(6.0, 5.0), cell_mm=0.5)
    beam = Beam(np.zeros(grid.subdivided(sub).shape), grid, sub, 0.3, 1.0)
    window = Window(beam, np.array([2 * np.pi / 2.0]))
    py, px = window.padded
    fx, fy = 7 / (px * window.cell_mm), -4 / (py * window.cell_mm)  # on the window's frequency grid
    yy, xx = np.meshgrid(np.arange(py) * window.cell_mm, np.arange(px) * window.cell_mm, indexing="ij")
    wave = np.exp(2j * np.pi * (fx * xx + fy * yy))[None]
    cells = window.cells(sfft.fft2(wave))
    # cell (r, c) centre sits (sub - 1) / 2 sub-cells past sub-cell (r sub, c sub) of the inner window
    at_y = (window.offset[0] + np.arange(grid.shape[0]) * sub + (sub - 1) / 2) * window.cell_mm
    at_x = (window.offset[1] + np.arange(grid.shape[1]) * sub + (sub - 1) / 2) * window.cell_mm
    expected = np.exp(2j * np.pi * (fx * at_x[None, :] + fy * at_y[:, None]))
    assert cells[0] == pytest.approx(expected, abs=1e-9)


@pytest.mark.parametrize(("cell_mm", "sub"), [(0.3, 3), (0.25, 1)])
def test_the_block_sums_count_every_pixel_centre_once(cell_mm, sub):
    """Fills from the block sums (regular blocks, and the fallback when a cell is not whole pixels) equal a plain
    count of solid pixel centres per (sub-)cell (np.add.at)."""
    rng = np.random.default_rng(7)
    masks = [rng.random((37, 53)) < 0.4 for _ in range(3)]
    stack = LayerStack.from_masks(masks, pixel_mm=0.1, layer_height_mm=0.1, origin_mm=(-2.63, -1.91, 0.0))
    grid = CellGrid.around(axis_mm=(0.07, -0.03), half_extent_mm=(2.9, 2.2), cell_mm=cell_mm)
    fine = grid.subdivided(sub)
    for run in cell_runs(stack, grid, sub=sub):
        rows = np.floor((stack.y_centres_mm - (grid.axis_mm[1] - grid.shape[0] / 2 * cell_mm)) / fine.cell_mm + 1e-6)
        cols = np.floor((stack.x_centres_mm - (grid.axis_mm[0] - grid.shape[1] / 2 * cell_mm)) / fine.cell_mm + 1e-6)
        count = np.zeros(fine.shape)
        r, c = np.nonzero(stack.layer(run.first))
        r, c = rows.astype(int)[r], cols.astype(int)[c]
        inside = (r >= 0) & (r < fine.shape[0]) & (c >= 0) & (c < fine.shape[1])
        np.add.at(count, (r[inside], c[inside]), 1.0)
        expected = np.minimum(count * (0.1 / fine.cell_mm) ** 2, 1.0)
        assert (run.fill if sub == 1 else run.fine_fill) == pytest.approx(expected, abs=1e-12)


def _assert_cells_count_every_pixel(stack: LayerStack, masks: list, grid: CellGrid, sub: int) -> None:
    """Assert each run's fills and edge lengths equal a plain count of its pixels: solid pixel centres per
    (sub-)cell, and 4-neighbour solid/void transitions per cell, each counted in the pixel before it (np.add.at);
    pixels outside the grid are not counted."""
    fine = grid.subdivided(sub)
    rows = np.floor((stack.y_centres_mm - (grid.axis_mm[1] - grid.shape[0] / 2 * grid.cell_mm)) / fine.cell_mm + 1e-6)
    cols = np.floor((stack.x_centres_mm - (grid.axis_mm[0] - grid.shape[1] / 2 * grid.cell_mm)) / fine.cell_mm + 1e-6)
    rows, cols = rows.astype(int), cols.astype(int)

    def per_cell(values):
        r, c = np.nonzero(values)
        w = values[r, c].astype(float)
        r, c = rows[r], cols[c]
        inside = (r >= 0) & (r < fine.shape[0]) & (c >= 0) & (c < fine.shape[1])
        out = np.zeros(fine.shape)
        np.add.at(out, (r[inside], c[inside]), w[inside])
        return out

    runs = list(cell_runs(stack, grid, with_edges=True, sub=sub))
    assert len(runs) == len(masks)
    for run, mask in zip(runs, masks):
        turns = np.zeros(mask.shape)
        turns[:, :-1] += mask[:, 1:] != mask[:, :-1]
        turns[:-1, :] += mask[1:, :] != mask[:-1, :]
        fill, edge = (run.fill, run.edge_mm) if sub == 1 else (run.fine_fill, run.fine_edge_mm)
        assert fill == pytest.approx(np.minimum(per_cell(mask) * (stack.pixel_mm / fine.cell_mm) ** 2, 1.0), abs=1e-12)
        # Crofton's pi / 4 per crossing
        assert edge == pytest.approx(per_cell(turns) * stack.pixel_mm * np.pi / 4, abs=1e-12)


@pytest.mark.parametrize("sub", [1, 3])
def test_cells_read_from_each_runs_solid_box_count_as_the_whole_frame(sub):
    """Cells give the fills and edge lengths of a plain count over the whole frame, blobs in the middle and
    touching every side of the frame."""
    rng = np.random.default_rng(11)
    ny, nx = 41, 57
    masks = []
    for r0, r1, c0, c1 in ((5, 12, 7, 20), (0, 9, 30, 57), (30, 41, 0, 11), (14, 27, 40, 57), (0, 41, 0, 57)):
        mask = np.zeros((ny, nx), bool)
        mask[r0:r1, c0:c1] = rng.random((r1 - r0, c1 - c0)) < 0.6
        masks.append(mask)
    stack = LayerStack.from_masks(masks, pixel_mm=0.1, layer_height_mm=0.1, origin_mm=(-2.83, -2.01, 0.0))
    grid = CellGrid.around(axis_mm=(0.07, -0.03), half_extent_mm=(2.9, 2.2), cell_mm=0.3)
    _assert_cells_count_every_pixel(stack, masks, grid, sub)


@pytest.mark.parametrize("sub, band_bytes", [(1, None), (2, None), (1, 7), (2, 7)])
def test_cells_counted_from_the_run_below_equal_a_fresh_count_of_every_run(sub, band_bytes, monkeypatch):
    """Each run's fills and edges are counted from what changed since the run below (packed bytes); on layers that
    change a little at a time (a disc shrinking ring by ring, pixels flipped at random, a layer left empty) and a
    grid that leaves frame pixels out on two sides and reaches past the frame on the others, they equal a plain
    count of every run's pixels; also when the changed bytes are counted a few at a time."""
    if band_bytes is not None:
        monkeypatch.setattr(cell_counting, "ADD_BYTES", band_bytes)
    rng = np.random.default_rng(23)
    ny, nx = 47, 61  # not whole bytes across: the padding bits of every packed row are read too
    yy, xx = np.mgrid[:ny, :nx]
    masks = []
    for k in range(10):
        mask = np.hypot(yy - 20.3, xx - 33.1) < 24 - 2 * k
        mask ^= rng.random((ny, nx)) < 0.02
        masks.append(mask)
    masks.insert(6, np.zeros((ny, nx), bool))
    stack = LayerStack.from_masks(masks, pixel_mm=0.1, layer_height_mm=0.1, origin_mm=(-3.0, -2.0, 0.0))
    grid = CellGrid.around(axis_mm=(0.4, 1.5), half_extent_mm=(2.9, 2.6), cell_mm=0.5)
    fine = grid.subdivided(sub)
    rows = fine._bins(stack.y_centres_mm, fine.axis_mm[1], fine.shape[0])
    cols = fine._bins(stack.x_centres_mm, fine.axis_mm[0], fine.shape[1])
    assert rows.min() < 0 and cols.min() < 0  # frame pixels below and left of the grid are not counted
    assert rows.max() < fine.shape[0] - 1 and cols.max() < fine.shape[1] - 1  # the grid reaches past the frame
    _assert_cells_count_every_pixel(stack, masks, grid, sub)


@pytest.mark.parametrize("parts, size", [(1, 5000), (3, 50000), (40, 5000)])
def test_a_slices_partly_filled_sub_cells_are_summed_once_per_sub_cell(parts, size):
    """The slice's screen sums the delays of a sub-cell that several runs leave partly filled: by a sort where the
    indices are few, by a count over the range where they are many, as they are where one run holds them all;
    against numpy's unbuffered np.add.at (a sum per index of a different kind)."""
    from services.optics.multislice import _summed_by_index

    rng = np.random.default_rng(parts)
    index = np.concatenate([np.sort(rng.choice(size, 300, replace=False)) for _ in range(parts)])
    values = rng.normal(size=(2, index.size)) + 1j * rng.normal(size=(2, index.size))
    unique, total = _summed_by_index(index, values, size)
    expected = np.zeros((2, size), dtype=complex)
    np.add.at(expected, (slice(None), index), values)
    assert np.array_equal(unique, np.unique(index))
    np.testing.assert_allclose(total, expected[:, unique], rtol=1e-12, atol=1e-12)
