"""How the optics chooses its analysis cells and its fine as-designed raster."""

import pytest

from services.optics import grids
from tests.services.optics.helpers import box, part_from


@pytest.fixture(scope="module")
def plate():
    return part_from(box(60.0, 60.0, 3.0), "plate")


def test_cells_are_whole_pixels_of_about_a_quarter_wavelength(plate):
    """lambda/4 at 140 GHz is 0.535 mm: ten 50 um pixels; the axis cell sits in the middle of an odd grid."""
    grid = grids.analysis_grid(plate, 0.05, 299.792458 / 140.0)
    assert grid.cell_mm == pytest.approx(0.5)
    assert grid.shape[0] % 2 == 1 and grid.shape[0] * grid.cell_mm >= 60.0
    assert grid.axis_index == (grid.shape[0] // 2, grid.shape[1] // 2)


def test_a_subwavelength_lattice_gets_one_period_per_cell(plate):
    """A 0.8 mm lattice at 300 GHz (lambda 1 mm) is averaged over whole periods, not aliased by 0.2 mm cells."""
    assert grids.analysis_grid(plate, 0.05, 0.9993).cell_mm == pytest.approx(0.2)
    assert grids.analysis_grid(plate, 0.05, 0.9993, period_mm=0.8).cell_mm == pytest.approx(0.8)
    assert grids.analysis_grid(plate, 0.05, 0.9993, period_mm=2.0).cell_mm == pytest.approx(0.2)


def test_the_design_raster_is_finer_than_the_printer_and_bounded(plate):
    """Half the printer's pixel and layer at least, the layer's phase step below 2 pi / 32, pixels bounded."""
    d = grids.design_grid(plate, printer_pixel_mm=0.05, printer_layer_mm=0.05, cell_mm=0.5,
                          wavelength_min_mm=299.792458 / 140.0, n_max=1.67)
    assert d.pixel_mm == pytest.approx(0.025) and d.layer_height_mm == pytest.approx(0.025)
    d = grids.design_grid(plate, printer_pixel_mm=0.05, printer_layer_mm=0.1, cell_mm=0.075,
                          wavelength_min_mm=0.3, n_max=1.67)
    assert 60.0 / d.pixel_mm <= grids.DESIGN_MAX_PIXELS_ACROSS
    assert d.layer_height_mm <= 0.3 / (32 * 0.67)
    assert "memory" in d.note


def test_the_march_runs_on_whole_pixel_sub_cells_of_an_eighth_wavelength(plate):
    """0.45 mm cells (nine 50 um pixels) at 155 GHz split 3 x 3 into 0.15 mm, the first whole-pixel split at or
    below lambda/8 = 0.242 mm (our rule; Goodman 2005 3.10 needs only lambda/2 for propagating waves, the finer
    sub-cells keep a zone wall's mixed cell thin). A lattice keeps one period per cell (its effective medium)."""
    lam = 299.792458 / 155.0
    grid = grids.analysis_grid(plate, 0.05, lam)
    assert grid.cell_mm == pytest.approx(0.45)
    assert grids.field_subdivision(grid, 0.05, lam) == 3
    assert grid.subdivided(3).shape == (grid.shape[0] * 3, grid.shape[1] * 3)
    assert grids.field_subdivision(grid, 0.05, lam, period_mm=0.45) == 1
    assert grids.slice_mm(lam, 1.6733) == pytest.approx(lam / (3 * 1.6733))
