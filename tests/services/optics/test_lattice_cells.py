"""Lattice plates read through the analysis cells: each cell reads whole lattice sites, never a mixture.

The reference is geometry: a disc of radius r in a unit cell of area p^2 (square) or sqrt(3)/2 p^2
(hexagonal) fills pi r^2 over that area (Euclid); the rectangles one period wide and one row high
centred on the sites tile the plane, so a cell's four shares sum to one.
"""

import manifold3d as m3d
import numpy as np
import pytest

from services.layers import build_layer_stack
from services.optics import grids
from services.optics.cells import CellGrid, cell_runs, site_reads, unit_cell_mm
from tests.services.optics.helpers import checked, part_from

SEGMENTS = 96


def _lattice_plate(kind: str, period_mm: float, radius_mm: float, half_mm: float = 6.0):
    """Return a part of equal round pillars on a lattice with a site on the origin, rows along x, 1 mm tall."""
    wx, wy = unit_cell_mm(kind, period_mm)
    rows = int(half_mm / wy) + 1
    circles = []
    for j in range(-rows, rows + 1):
        shift = (j % 2) * period_mm / 2 if kind == "hex" else 0.0
        for i in range(-int(half_mm / wx) - 1, int(half_mm / wx) + 2):
            x, y = i * period_mm + shift, j * wy
            if abs(x) <= half_mm and abs(y) <= half_mm:
                a = np.arange(SEGMENTS) * 2 * np.pi / SEGMENTS
                circles.append(np.column_stack([x + radius_mm * np.cos(a), y + radius_mm * np.sin(a)]))
    solid = checked(m3d.Manifold.extrude(m3d.CrossSection(circles), 1.0))
    return part_from(solid, f"{kind} lattice")


def _polygon_fill(kind: str, period_mm: float, radius_mm: float) -> float:
    """Return the fill of one site: the 96-gon's area (1/2 n r^2 sin(2 pi / n)) over the unit cell's."""
    wx, wy = unit_cell_mm(kind, period_mm)
    return 0.5 * SEGMENTS * radius_mm**2 * np.sin(2 * np.pi / SEGMENTS) / (wx * wy)


@pytest.mark.parametrize(("kind", "period_mm", "radius_mm"), [("hex", 0.5, 0.2), ("hex", 0.437, 0.2),
                                                                ("square", 0.437, 0.19)])
def test_a_uniform_lattice_reads_its_unit_cell_fill_in_every_cell(kind, period_mm, radius_mm):
    """Every cell well inside a uniform lattice reads the site's fill within 0.008 (the 0.01 mm pixel grid's error),
    for a hexagonal lattice and for a period that is no whole number of pixels; square cells one period
    across read the same hexagonal lattice with a spread several times larger (what the check did before)."""
    part = _lattice_plate(kind, period_mm, radius_mm)
    stack = build_layer_stack(part, pixel_mm=0.01, layer_height_mm=0.5)
    grid = grids.analysis_grid(part, 0.01, 1.0, period_mm, lattice=kind)
    assert grid.lattice == (kind, period_mm)
    want = _polygon_fill(kind, period_mm, radius_mm)
    inner = grid.radius_mm() < 4.0
    (run,) = [r for r in cell_runs(stack, grid) if r.fill.max() > 0]
    assert np.abs(run.fill[inner] - want).max() < 0.008
    assert np.abs(run.site_fill[:, inner] - want).max() < 0.008
    if kind == "hex":
        plain = CellGrid(grid.cell_mm, grid.axis_mm, grid.shape)
        (old,) = [r for r in cell_runs(stack, plain) if r.fill.max() > 0]
        assert np.ptp(old.fill[inner]) > 0.05, np.ptp(old.fill[inner])


@pytest.mark.parametrize("kind", ["square", "hex"])
def test_the_four_shares_of_a_cell_sum_to_one_and_pick_its_neighbouring_sites(kind):
    """Bilinear shares of the four site rectangles a unit window on each cell overlaps: they sum to one, the
    sites lie within one period and one row of the cell centre, and a cell on a site reads that site alone."""
    period = 0.4
    grid = CellGrid.around(axis_mm=(0.0, 0.0), half_extent_mm=(3.0, 3.0), cell_mm=0.45, lattice=(kind, period))
    reads = site_reads(grid)
    assert reads.weight.sum(axis=0) == pytest.approx(np.ones(grid.shape), abs=1e-12)
    assert (reads.weight >= -1e-12).all()
    _, wy = unit_cell_mm(kind, period)
    assert np.all(np.abs(reads.row_y - grid.y_mm[None]) <= wy + 1e-12)
    assert np.all(np.abs(reads.x - grid.x_mm[None, None]) <= period + 1e-12)
    centre = grid.axis_index
    assert reads.weight[:, centre[0], centre[1]].max() == pytest.approx(1.0)


def test_row_strips_sum_each_pixel_row_by_the_share_of_it_they_cover():
    """Strips with edges anywhere (inside pixels, on their boundaries, past the frame) against the overlap of
    each pixel row [k, k + 1) with each strip, summed directly."""
    from services.optics.cells import _RowStrips

    rng = np.random.default_rng(7)
    a = (rng.random((57, 9)) > 0.4).astype(np.uint8)
    centres = 0.1 * np.arange(57) + 0.05
    edges_mm = np.array([-0.37, 0.0, 0.23, 0.5, 1.17, 1.19, 3.3, 5.0, 5.7, 6.4])
    got = _RowStrips(centres, 0.1, edges_mm)(a)
    e = np.clip(edges_mm / 0.1, 0, 57)
    k = np.arange(57)
    share = np.clip(np.minimum(k[None] + 1, e[1:, None]) - np.maximum(k[None], e[:-1, None]), 0, None)
    assert got == pytest.approx(share @ a.astype(float), abs=1e-12)
