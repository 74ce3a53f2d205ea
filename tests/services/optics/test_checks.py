"""Rules phase_error (Marechal) and period (grating equation)."""

from dataclasses import replace

import numpy as np
import pytest

from services.layers import LayerStack, build_layer_stack
from services.optics import optics_report
from services.optics.cells import CellGrid
from services.optics.checks import (
    detect_period_mm, period_finding, phase_error, phase_error_finding, safe_period_mm,
)
from services.optics.gaussian import field as gaussian_field
from services.optics.materials import rf_values
from services.optics.transmission import cell_sparams
from services.settings import OpticsSettings
from tests.services.optics.helpers import hyperbolic_lens, material, printer

N = float(np.sqrt(2.8))


@pytest.fixture(scope="module")
def lens():
    """A 20 mm plano-hyperbolic lens, f = 40 mm, n = sqrt(2.8): the sag spans 18 layers of 0.1 mm."""
    return hyperbolic_lens(10.0, N, 40.0, base_mm=1.0, points=200, segments=128)


def test_layer_steps_of_a_tenth_of_a_millimetre_pass_at_100_ghz(lens):
    """0.1 mm steps at 100 GHz: sigma = 2 pi (n-1) 0.1 / sqrt(12) / lambda, Strehl about 0.998 (Marechal; optics.md 5)."""
    bay = printer(pixel_mm=0.1, layer_mm=0.1)
    stack = build_layer_stack(lens, pixel_mm=bay.pixel_mm, layer_height_mm=bay.layer_height_mm)
    result = optics_report(part=lens, printed=stack, material=material(), printer=bay,
                           settings=OpticsSettings(freqs_ghz=(100.0,)))
    strehl = result.to_dict()["phase_error"]["strehl"][0]
    assert 0.995 <= strehl < 1.0
    assert not [f for f in result.findings if f.rule == "phase_error"]


def _thickness_error_stack(design: LayerStack, layers: int, block_mm: float) -> LayerStack:
    """Return the design with every column thicker or thinner by ``layers`` in a checkerboard of blocks."""
    x = design.x_centres_mm
    y = design.y_centres_mm
    thicker = ((np.floor(x / block_mm)[None, :] + np.floor(y / block_mm)[:, None]) % 2) == 0
    empty = np.zeros(design.shape, dtype=bool)
    masks = []
    for k in range(design.count + layers):
        up = design.layer(max(k - layers, 0))
        down = design.layer(k + layers) if k + layers < design.count else empty
        masks.append(np.where(thicker, up, down))
    return LayerStack.from_masks(masks, pixel_mm=design.pixel_mm, layer_height_mm=design.layer_height_mm,
                                 origin_mm=design.origin_mm)


def test_fifty_micron_rms_thickness_error_at_1_thz_is_flagged(lens):
    """+-50 um thickness error at 1 THz: sigma = 0.706 rad, Strehl about 0.61 (Marechal; optics.md 6 [C]) -> caution."""
    design = build_layer_stack(lens, pixel_mm=0.0375, layer_height_mm=0.025)
    printed = _thickness_error_stack(design, layers=2, block_mm=2.0)
    rf = rf_values(material(), [1000.0])
    grid = CellGrid.around(axis_mm=(0.0, 0.0), half_extent_mm=(10.2, 10.2), cell_mm=0.075)
    weights = gaussian_field(grid.x_mm[None, :], grid.y_mm[:, None], 8.0) ** 2 * (grid.radius_mm() < 10.0)
    err = phase_error(cell_sparams(printed, grid, rf)["nominal"].s21, cell_sparams(design, grid, rf)["nominal"].s21,
                      weights)
    assert err.rms_rad[0] == pytest.approx(2 * np.pi * (N - 1) * 0.05 / 0.299792458, rel=0.05)
    assert err.strehl[0] == pytest.approx(0.6078, abs=0.03)
    found = phase_error_finding(err, rf.freqs_ghz, blocker_strehl=0.5)
    assert found.severity == "caution" and found.limit == 0.8
    assert phase_error_finding(err, rf.freqs_ghz, blocker_strehl=0.7).severity == "blocker"


def test_safe_period_follows_the_grating_equation():
    """Lambda < lambda / (n_max + sin theta): 1.7916 mm at 100 GHz for n 1.6733, 1.3794 mm at 30 deg (optics.md 7)."""
    lam = 299.792458 / 100.0
    assert safe_period_mm(lam, 1.6733) == pytest.approx(1.7916, abs=1e-4)
    assert safe_period_mm(lam, 1.6733, np.sin(np.radians(30))) == pytest.approx(1.3794, abs=1e-4)
    assert period_finding(1.0, "declared", lam, 1.6733, 100.0) is None
    found = period_finding(2.0, "declared", lam, 1.6733, 100.0)
    assert found.severity == "caution" and found.limit == pytest.approx(1.7916, abs=1e-4)


def _pillar_mask(period_mm: float, pixel_mm: float = 0.05, size_mm: float = 30.0, fill: float = 0.3):
    x = (np.arange(int(size_mm / pixel_mm)) + 0.5) * pixel_mm
    u = (x % period_mm) - period_mm / 2
    r2 = u[None, :] ** 2 + u[:, None] ** 2
    return r2 <= fill * period_mm**2 / np.pi


def test_it_detects_a_pillar_lattice_period_and_ignores_a_disc():
    """The strongest lattice peak gives the period; a plain disc has none."""
    assert detect_period_mm(_pillar_mask(2.0), 0.05, 4.5) == pytest.approx(2.0, rel=0.03)
    assert detect_period_mm(_pillar_mask(0.8), 0.05, 4.5) == pytest.approx(0.8, rel=0.03)
    x = (np.arange(600) - 300) * 0.05
    disc = x[None, :] ** 2 + x[:, None] ** 2 < 12.0**2
    assert detect_period_mm(disc, 0.05, 4.5) is None


@pytest.mark.parametrize("shape", [(600, 600), (601, 437), (437, 601)])
@pytest.mark.parametrize("along", ["x", "y", "diagonal"])
def test_a_grating_period_is_found_along_either_axis_on_odd_and_even_grids(shape, along):
    """Bars 14 pixels apart (0.70 mm at 0.05 mm) in any direction, on grids of odd and even sides.

    The check reads only half of the (symmetric) power spectrum; a grating along y puts its peak in the half's
    first column, whose neighbours lie in the other half. Expected: the construction's own period (along the
    diagonal, 14 px / sqrt(2) apart along the normal), and the full-spectrum double-precision search that
    numpy's ``fft2`` gives on the same raster, which the check replaced: within 1 %, under half a bin (2.4 % here;
    an off-bin peak's two middle bins can tie, and single precision may then centre the 3 x 3 sum on the other).
    """
    rows, cols = np.mgrid[0:shape[0], 0:shape[1]]
    coordinate = {"x": cols, "y": rows, "diagonal": rows + cols}[along]
    bars = (coordinate // 7) % 2 == 0
    period = detect_period_mm(bars, 0.05, 4.5)
    expected = 0.70 / (np.sqrt(2) if along == "diagonal" else 1.0)
    assert period == pytest.approx(expected, rel=0.02)
    assert period == pytest.approx(_full_spectrum_period_mm(bars, 0.05, 4.5), rel=0.01)


def _full_spectrum_period_mm(mask, pixel_mm, max_period_mm):
    """The strongest 3 x 3 peak of the full power spectrum (numpy fft2, float64) and its centroid's period."""
    crop = mask.astype(np.float64) - mask.mean()
    power = np.abs(np.fft.fft2(crop)) ** 2
    fy, fx = np.fft.fftfreq(crop.shape[0], pixel_mm)[:, None], np.fft.fftfreq(crop.shape[1], pixel_mm)[None, :]
    f_min = max(1 / max_period_mm, 3 / (pixel_mm * max(crop.shape)))
    local = sum(np.roll(power, (dy, dx), axis=(0, 1)) for dy in (-1, 0, 1) for dx in (-1, 0, 1))
    k = np.unravel_index(np.argmax(np.where(np.hypot(fx, fy) >= f_min, local, -1.0)), power.shape)
    rows = [(k[0] + d) % power.shape[0] for d in (-1, 0, 1)]
    cols = [(k[1] + d) % power.shape[1] for d in (-1, 0, 1)]
    p = power[np.ix_(rows, cols)]
    gx = fx[0, k[1]] + np.array([-1, 0, 1]) * (fx[0, 1] - fx[0, 0])
    gy = fy[k[0], 0] + np.array([-1, 0, 1]) * (fy[1, 0] - fy[0, 0])
    return 1 / np.hypot((p.sum(axis=0) * gx).sum() / p.sum(), (p.sum(axis=1) * gy).sum() / p.sum())


def test_the_report_cautions_a_diffracting_declared_period(lens):
    """A parametric part declaring period_mm = 2.5 at 100 GHz gets a period caution with the safe period."""
    declared = replace(lens, parameters={"period_mm": 2.5})
    bay = printer(pixel_mm=0.1, layer_mm=0.1)
    stack = build_layer_stack(declared, pixel_mm=0.1, layer_height_mm=0.1)
    result = optics_report(part=declared, printed=stack, material=material(), printer=bay,
                           settings=OpticsSettings(freqs_ghz=(90.0, 100.0)))
    (found,) = [f for f in result.findings if f.rule == "period"]
    assert found.measured == 2.5 and found.limit == pytest.approx(1.7916, abs=1e-3)


def test_a_strehl_ratio_above_one_with_the_peak_short_of_the_ideal_wave_s_is_read_as_no_focus():
    """The note names every frequency whose Strehl ratio reads above 1.02 with its on-axis peak short of 0.8 of the
    ideal wave's, and the worst one's distances; above 1.02 with the peaks together (a fast lens), or a peak short of
    the ideal's below 1.02 (an aberrated part), nothing is said."""
    from services.optics.checks import strehl_above_one_finding

    freqs = np.array([95.0, 100.0, 105.0])
    best, wavefront, ideal = np.array([7.0, 7.4, 8.1]), np.array([36.0, 36.6, 37.1]), np.array([18.0, 18.2, 18.4])
    assert strehl_above_one_finding(freqs, np.array([0.93, 1.0, 1.02]), best, wavefront, ideal) is None
    together = np.array([13.0, 13.05, 13.1])
    assert strehl_above_one_finding(freqs, np.array([1.06, 1.06, 1.06]), together * 0.99, wavefront, together) is None
    note = strehl_above_one_finding(freqs, np.array([1.2, 1.41, 1.01]), best, wavefront, ideal)
    assert (note.rule, note.severity, note.count, note.measured) == ("focus", "note", 2, 1.41)
    assert "95 GHz (1.20), 100 GHz (1.41)" in note.message and "105 GHz" not in note.message
    (one,) = [strehl_above_one_finding(freqs[1:2], np.array([1.41]), best[1:2], wavefront[1:2], ideal[1:2])]
    assert one.message.startswith("The Strehl ratio reads 1.41 at 100 GHz, above 1: the beam's on-axis peak lies 7.4 mm")
    assert "peaks (18.2 mm)" in one.message and "converges (36.6 mm)" in one.message


def test_a_plate_that_barely_focuses_gets_the_note_and_lenses_do_not():
    """A 20 mm graded-index plate for f = 30 mm at 100 GHz on the starter resin printer has most of its holes
    clipped to the printer's smallest: its on-axis peak lies a few millimetres from it and reads a Strehl ratio
    near 1.4, which the note explains; the zoned lens of the same size and focus reads about 1, and a 30 mm
    plano-convex lens at f = 15 mm reads a little above 1 with its peak where the ideal wave's is: no note."""
    from services import catalogue
    from services.components import build_component
    from services.layers import orient_part

    bay, resin = catalogue.printer("bay1-lcd-resin"), catalogue.material("standard-resin")
    notes = {}
    for kind, extra in (("graded-index", {"lattice": "square"}), ("zoned", {}), ("plano-convex", {"diameter_mm": 30.0})):
        settings = OpticsSettings(freqs_ghz=(100.0,), focal_length_mm=15.0 if kind == "plano-convex" else 30.0)
        part = orient_part(build_component(kind, {"diameter_mm": 20.0, "focal_length_mm": settings.focal_length_mm,
                                                   "freq_ghz": 100.0, **extra}, material=resin, printer=bay).part, "+z")
        stack = build_layer_stack(part, pixel_mm=bay.pixel_mm, layer_height_mm=bay.layer_height_mm)
        result = optics_report(part=part, printed=stack, material=resin, printer=bay, settings=settings,
                               with_figures=False)
        notes[kind] = ([f for f in result.findings if f.rule == "focus"], result.to_dict()["focus"])
    (plate_note,), plate_focus = notes["graded-index"]
    assert plate_focus["strehl"][0] > 1.2 and plate_focus["best_focus_mm"][0] < 0.5 * plate_focus["wavefront_focus_mm"][0]
    assert plate_note.measured == pytest.approx(plate_focus["strehl"][0], abs=1e-4)
    assert notes["zoned"][0] == [] and notes["zoned"][1]["strehl"][0] == pytest.approx(1.0, abs=0.02)
    # An f/0.5 lens reads a little above 1 (the scalar reference at a high aperture), its peak where the ideal's is.
    fast = notes["plano-convex"][1]
    assert notes["plano-convex"][0] == [] and fast["best_focus_mm"][0] == pytest.approx(fast["ideal_peak_mm"][0], rel=0.1)
