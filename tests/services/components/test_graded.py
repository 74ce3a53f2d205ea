"""Graded-index plates: period limit, phase map against the lens, and every cell inside the printer's limits."""

import re

import numpy as np
import pytest
import tmm
from scipy.spatial import cKDTree

from services.components import build_component
from services.errors import UnusableInput

from .conftest import solid_of, wavelength


def _plate(resin, printer=None, **params):
    defaults = {"diameter_mm": 12.0, "focal_length_mm": 12.0, "freq_ghz": 300.0, "cell": "pillar"}
    return build_component("graded-index", {**defaults, **params}, material=resin, printer=printer)


def test_the_default_period_keeps_p_n_over_lambda_at_one_half(resin):
    """n 1.6733 at 100 GHz: the lattice diffracts from 1.7916 mm (optics.md sections 7 and 13); the default takes
    half of it, p n / lambda = 0.5 (docs/rigorous-cells.md: where the cell models are accurate), on whole microns;
    used up to 120 GHz, 100/120 of that. A hexagonal lattice may be 2/sqrt(3) coarser (reciprocal lattice)."""
    square = _plate(resin, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0).derived
    assert square["period_limit_mm"] == pytest.approx(1.7916, abs=5e-5)
    assert square["period_mm"] == 0.895 and square["period_rule"].startswith("p n / lambda = 0.5 at 100 GHz")
    wide = _plate(resin, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0, max_freq_ghz=120.0).derived
    assert wide["period_mm"] == 0.746  # 1.7916 / 1.2 / 2 = 0.7465
    hexagonal = _plate(resin, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0, lattice="hex").derived
    assert hexagonal["period_limit_mm"] == pytest.approx(1.7916 * 2 / np.sqrt(3), abs=1e-4)
    assert hexagonal["period_mm"] == pytest.approx(1.7916 / np.sqrt(3), abs=1e-3)


def test_the_default_period_is_no_finer_than_the_printer_makes(resin, fine_printer, coarse_printer):
    """A 0.1 mm feature and gap make cells down to 0.1 / cos(pi / N) + 0.1 mm (the N-gon's flats), far below
    100 GHz's 0.895 mm; at 300 GHz a 0.3 mm gap and 0.15 mm wall need at least 0.45 mm against an accurate
    0.298 mm: refused, naming both, the frequency where they meet (300 x 0.298 / smallest) and the larger
    period the user may still give (below the 0.5970 mm diffraction limit)."""
    fine = _plate(resin, fine_printer, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0).derived
    assert fine["period_mm"] == 0.895 and "the printer makes cells down to a 0.20" in fine["period_rule"]
    with pytest.raises(UnusableInput) as info:
        _plate(resin, coarse_printer, cell="hole")
    message = info.value.message
    assert info.value.code == "period_conflict" and message.endswith(".")
    smallest = float(re.search(r"needs at least (0\.\d+) mm for its holes", message).group(1))
    assert 0.45 <= smallest <= 0.46
    assert "up to a 0.298 mm period" in message and "0.3 mm smallest hole, 0.15 mm smallest wall" in message
    assert f"design for {int(300 * 0.298 / smallest)} GHz or less" in message and "up to 0.597 mm yourself" in message


def test_it_refuses_a_period_above_the_diffraction_limit(resin):
    """1.8 mm at 100 GHz diffracts; 1.5 mm is fine at 100 GHz but not when the plate must work up to 120 GHz."""
    with pytest.raises(UnusableInput, match=r"below 1\.7916 mm") as info:
        _plate(resin, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0, period_mm=1.8)
    assert info.value.code == "period_too_large"
    _plate(resin, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0, period_mm=1.5)
    with pytest.raises(UnusableInput, match="at 120 GHz"):
        _plate(resin, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0, max_freq_ghz=120.0, period_mm=1.5)


def _bruggeman(fill, eps):
    """Symmetric 2-D Bruggeman: f (eps - e)/(eps + e) + (1 - f)(1 - e)/(1 + e) = 0 (Bruggeman 1935; Choy 1999),
    solved here as its quadratic with numpy's root finder."""
    roots = np.roots([1.0, -(2 * fill - 1) * (eps - 1), -eps])
    return roots[np.argmax(roots.real)]


def _cell_delay(fill, height, base, lam, eps):
    """Delay of one cell from tmm (Byrnes; e^{-i w t}, so arg t is the delay)."""
    n_eff, n = np.sqrt(_bruggeman(fill, eps)), np.sqrt(eps)
    layers, d = ([1, n_eff, n, 1], [np.inf, height, base, np.inf]) if base > 0 else ([1, n_eff, 1], [np.inf, height, np.inf])
    return np.angle(tmm.coh_tmm("s", layers, d, 0, lam)["t"])


@pytest.mark.parametrize("cell", ["pillar", "hole"])
def test_the_achieved_phase_map_follows_the_lens(resin, cell, monkeypatch):
    """Where the check's cell model is the effective medium (forced here: every declared lattice now has a
    rigorous table), the plate is designed with it: each cell's delay, recomputed independently (own
    Bruggeman solve + tmm), matches the thin-lens phase -(2 pi / lambda)(sqrt(r^2 + f^2) - f) (optics.md
    section 8) up to one global offset: RMS under 0.01 rad, and the reported RMS is the one found here."""
    from services.components import graded
    from services.optics.cell_model import CellIndex

    monkeypatch.setattr(graded, "declared_cell_index", lambda params, rf, period, **kw: (
        CellIndex(rf.eps_r * (1 - 1j * rf.tan_delta)), "effective medium: chosen by the test"))
    component = _plate(resin, cell=cell, focal_length_mm=7.2, lattice="hex")
    d, cells = component.derived, component.cells
    assert d["effective_medium_model"] == "bruggeman_2d" and d["cell_model"]["model"] == "effective_medium"
    assert set(cells.designed_by) <= {"effective_medium", "uniform"} and "the test" in d["cell_model"]["why"]
    lam, f, eps = wavelength(300.0), 7.2, 2.8 * (1 + 0.02j)
    achieved = np.array([_cell_delay(x, d["height_mm"], 1.0, lam, eps) for x in cells.fill])
    target = -2 * np.pi / lam * (np.hypot(np.hypot(cells.x_mm, cells.y_mm), f) - f)
    offset = np.angle(np.mean(np.exp(1j * (achieved - target))))
    residual = np.angle(np.exp(1j * (achieved - target - offset)))
    rms = np.sqrt(np.mean(residual**2))
    assert rms < 0.01
    assert d["phase_rms_error_rad"] == pytest.approx(rms, abs=2e-3)
    assert d["cells"] == len(cells.x_mm) > 100
    # The target really varies over the plate: a lens of about two zones, not a flat plate.
    assert np.ptp(target) > 3 * np.pi


def _cross_section(part, z):
    """Return each closed contour of the slice at height z, as (centroid, circumradius, inradius, area)."""
    out = []
    for poly in solid_of(part).slice(z).to_polygons():
        centre = poly.mean(axis=0)
        mids = (poly + np.roll(poly, -1, axis=0)) / 2
        area = 0.5 * abs(np.dot(poly[:, 0], np.roll(poly[:, 1], -1)) - np.dot(poly[:, 1], np.roll(poly[:, 0], -1)))
        out.append((centre, np.linalg.norm(poly - centre, axis=1).max(), np.linalg.norm(mids - centre, axis=1).min(), area))
    return out


def _gaps(shapes, period):
    centres = np.array([s[0] for s in shapes])
    corner = np.array([s[1] for s in shapes])
    pairs = cKDTree(centres).query_pairs(1.01 * period, output_type="ndarray")
    return np.linalg.norm(centres[pairs[:, 0]] - centres[pairs[:, 1]], axis=1) - corner[pairs].sum(axis=1)


def test_every_pillar_on_the_mesh_is_inside_the_printers_limits(resin, fine_printer):
    """Slice halfway up the pillars: every pillar is at least 0.1 mm across its flats, neighbours keep 0.1 mm
    apart, pillar areas are the cells' areas, and the clipping error is reported (larger than the ideal one)."""
    component = _plate(resin, fine_printer, period_mm=0.48, diameter_mm=10.0, focal_length_mm=10.0)
    d = component.derived
    assert d["height_mm"] / 0.025 == pytest.approx(round(d["height_mm"] / 0.025), abs=1e-6)  # whole layers
    shapes = _cross_section(component.part, 1.0 + d["height_mm"] / 2)
    pillars = [s for s in shapes if s[1] < 0.3]
    assert len(pillars) == int((component.cells.diameter_mm > 0).sum())
    assert min(2 * s[2] for s in pillars) >= 0.1 - 1e-9
    assert _gaps(pillars, 0.48).min() >= 0.1 - 1e-9
    equivalent = np.sort([2 * np.sqrt(s[3] / np.pi) for s in pillars])
    assert equivalent == pytest.approx(np.sort(component.cells.diameter_mm[component.cells.diameter_mm > 0]), abs=1e-6)
    assert d["cells_clipped"] > 0 and d["phase_rms_error_rad"] >= d["phase_rms_error_ideal_rad"]
    assert d["phase_rms_error_rad"] < 0.05


def test_every_hole_on_the_mesh_is_inside_the_printers_limits(resin, coarse_printer):
    """Holes at least the 0.3 mm gap across, walls between them at least the 0.15 mm feature (at a period the
    user gives: the default is refused on this printer, see above)."""
    component = _plate(resin, coarse_printer, cell="hole", diameter_mm=8.0, focal_length_mm=8.0, period_mm=0.597)
    d = component.derived
    shapes = _cross_section(component.part, 1.0 + d["height_mm"] / 2)
    holes = [s for s in shapes if s[1] < d["period_mm"]]
    assert len(holes) == int((component.cells.diameter_mm > 0).sum()) > 20
    assert min(2 * s[2] for s in holes) >= 0.3 - 1e-9
    assert _gaps(holes, d["period_mm"]).min() >= 0.15 - 1e-9
    assert d["phase_rms_error_rad"] < 0.05 and d["phase_coverage"] > 0.99


def test_it_refuses_cells_the_printer_cannot_make(resin, coarse_printer):
    """A 0.4 mm period cannot hold a 0.15 mm pillar and a 0.3 mm gap: the message gives the smallest period
    (0.15 mm across the N-gon's flats is 0.15 / cos(pi / N) across its corners: 0.45-0.46 mm)."""
    with pytest.raises(UnusableInput, match=r"period of at least 0\.45\d? mm"):
        _plate(resin, coarse_printer, period_mm=0.4)


def test_it_refuses_a_default_height_too_tall_to_be_a_plate(resin, coarse_printer):
    """At 300 GHz this printer's pillars (0.15-0.30 mm at 0.596 mm) span so little phase that 2 pi would need
    over ten wavelengths of height: refused with the way out (holes work: see the hole test above)."""
    with pytest.raises(UnusableInput, match="try holes instead of pillars") as info:
        _plate(resin, coarse_printer, period_mm=0.596)
    assert info.value.code == "cells_span_too_little"


def test_pillars_need_a_base(resin):
    """Pillars on nothing would be loose: base_thickness_mm 0 is for through holes only."""
    with pytest.raises(UnusableInput, match="base"):
        _plate(resin, base_thickness_mm=0.0)
    assert _plate(resin, cell="hole", base_thickness_mm=0.0).part.watertight


@pytest.mark.parametrize("params", [{"lattice": "hex"}, {"cell": "hole", "lattice": "hex"}, {"flange_width_mm": 0.0}])
def test_every_plate_is_a_closed_solid(resin, params):
    """Watertight, NoError on re-import, one body, intake finds nothing, parameters carry the period."""
    component = _plate(resin, **params)
    part = component.part
    assert part.watertight and part.bodies == 1 and part.findings == () and part.volume_mm3 > 0
    assert solid_of(part).volume() == pytest.approx(part.volume_mm3, rel=1e-9)
    assert part.parameters["period_mm"] == component.derived["period_mm"] > 0
    assert part.parameters["height_mm"] == component.derived["height_mm"] > 0


def _abcd_delay(n, z, height_mm, n_base, base_mm, lam_mm):
    """Delay -arg S21 of a cell layer (index n, impedance z over eta0) on a solid base, from the layers' ABCD
    matrices (Pozar 2012, tables 4.1 and 4.2: S21 = 2 / (A + B + C + D)), written out here."""
    m = np.eye(2, dtype=complex)
    for index, impedance, d in ((n, z, height_mm), (n_base, 1 / n_base, base_mm)):
        phase = 2 * np.pi / lam_mm * index * d
        m = m @ np.array([[np.cos(phase), 1j * impedance * np.sin(phase)], [1j * np.sin(phase) / impedance, np.cos(phase)]])
    return -np.angle(2 / m.sum())


def _rms_after_piston(delay, target):
    diff = np.exp(1j * (np.asarray(delay) - target))
    return float(np.sqrt(np.mean(np.angle(diff * np.exp(-1j * np.angle(diff.mean()))) ** 2)))


@pytest.mark.parametrize("lattice", ["square", "hex"])
@pytest.mark.parametrize("cell", ["pillar", "hole"])
def test_the_designed_phase_is_the_phase_the_check_predicts(resin, cell, lattice):
    """A small square or hexagonal plate (about 300 cells) at one frequency: the check's cell model, reached as the check
    reaches it (the part's declared lattice, ``cell_index_for``), reads the table the generator built from the
    cache, and every cell's delay through it lands on the generator's lens target within 0.3 deg rms after
    the piston (fill grid resolution).
    The table itself is checked against the Airy slab (Born & Wolf 7.6), Rytov's lamellar grating and Maxwell
    Garnett's fine-lattice limits in tests/services/optics/test_rigorous.py; the effective medium, which
    designed these cells before, misses the same targets by three times as much (about 1 deg at this fine
    period; 16-20 deg at the old default period, benchmarks/README.md)."""
    from services.components.cells import cell_transmission
    from services.optics.cell_model import cell_index_for
    from services.optics.materials import rf_values

    component = _plate(resin, cell=cell, diameter_mm=6.0, focal_length_mm=3.0, lattice=lattice)  # the target spans 2 pi
    d, cells, params = component.derived, component.cells, component.part.parameters
    assert d["cell_model"]["model"] == "rigorous_table" and set(cells.designed_by) == {"rigorous_table"}
    assert d["cell_model"]["table"]["lattice"] == lattice
    index, _ = cell_index_for(component.part, rf_values(resin, [300.0]), (params["period_mm"], "declared"), terms=21)
    assert index.table.source.startswith("cache") and index.table.to_dict()["key"] == d["cell_model"]["table"]["key"]
    n, z = index(cells.fill)
    n_base = np.sqrt(2.8 * (1 - 0.02j))
    checked = [_abcd_delay(a, b, d["height_mm"], n_base, 1.0, wavelength(300.0)) for a, b in zip(n[0], z[0])]
    agreement = _rms_after_piston(checked, cells.target_rad)
    assert np.degrees(agreement) < 0.3
    assert d["phase_rms_error_rad"] == pytest.approx(agreement, abs=2e-3)
    old = cell_transmission(cells.fill, eps_r=2.8, tan_delta=0.02, height_mm=d["height_mm"], base_mm=1.0, freq_ghz=300.0)
    assert _rms_after_piston(-np.angle(old), cells.target_rad) > 3 * agreement


def test_it_refuses_pillars_too_slender_for_the_printer():
    """At 100 GHz Bay 1's pillars (0.15 mm feature, 0.3 mm gap at a 0.9 mm period) need well over 10 mm of
    height for 2 pi: over 60 times their narrowest width, where its aspect-ratio blocker is 12."""
    from services import catalogue

    with pytest.raises(UnusableInput) as info:
        build_component("graded-index", {"diameter_mm": 10.0, "focal_length_mm": 10.0, "freq_ghz": 100.0,
                                         "cell": "pillar"},
                        material=catalogue.material("standard-resin"), printer=catalogue.printer("bay1-lcd-resin"))
    assert info.value.code == "pillars_too_slender"
    assert "above Bay 1 - LCD-masked resin's limit of 12" in info.value.message
    assert int(re.search(r"a height (\d+) times", info.value.message).group(1)) > 60


@pytest.mark.parametrize("lattice", ["square", "hex"])
@pytest.mark.parametrize("cell", ["pillar", "hole"])
def test_the_checks_cells_read_the_plate_the_generator_designed(resin, cell, lattice):
    """The plate's mesh, rasterised and read through the check's own analysis cells (each cell the lattice sites
    it overlaps, ``optics.cells``), gives back the thin-lens target (optics notes section 8) at the cell centres
    within 4 deg rms after the piston. Square cells one period across read a hexagonal plate with about
    30 deg rms: mixed fills across the 2 pi seam, and 0.43-0.57 for a uniform lattice."""
    from services.components.formulas import thin_lens_path_mm
    from services.layers import build_layer_stack, orient_part
    from services.optics import grids
    from services.optics.cell_model import cell_index_for
    from services.optics.cells import CellGrid
    from services.optics.materials import rf_values
    from services.optics.transmission import cell_sparams

    component = _plate(resin, cell=cell, diameter_mm=6.0, focal_length_mm=3.0, lattice=lattice, flange_width_mm=0.0)
    part = orient_part(component.part, "+z")
    period, lam = part.parameters["period_mm"], wavelength(300.0)
    stack = build_layer_stack(part, pixel_mm=0.01, layer_height_mm=0.05)
    rf = rf_values(resin, [300.0])
    index, _ = cell_index_for(part, rf, (period, "declared"), terms=21)
    grid = grids.analysis_grid(part, 0.01, lam, period, lattice=lattice)
    r = grid.radius_mm()
    inside = r < 3.0 - period
    target = -2 * np.pi / lam * thin_lens_path_mm(r[inside], 3.0)

    def delay(g):
        return -np.angle(cell_sparams(stack, g, rf, cells=index)["nominal"].s21[0][inside])

    assert np.degrees(_rms_after_piston(delay(grid), target)) < 4.0
    if lattice == "hex":
        plain = CellGrid(grid.cell_mm, grid.axis_mm, grid.shape)
        assert np.degrees(_rms_after_piston(delay(plain), target)) > 15.0
