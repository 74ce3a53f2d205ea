"""Graded-index plates: period limit, phase map against the lens, and every cell inside the printer's limits."""

import numpy as np
import pytest
import tmm
from scipy.spatial import cKDTree

from services.components import build_component
from services.errors import UnusableInput

from .conftest import solid_of, wavelength


def _plate(resin, printer=None, **params):
    defaults = {"diameter_mm": 12.0, "focal_length_mm": 12.0, "freq_ghz": 300.0}
    return build_component("graded-index", {**defaults, **params}, material=resin, printer=printer)


def test_the_default_period_is_just_under_the_no_diffraction_limit(resin):
    """n 1.6733 at 100 GHz: period < 1.7916 mm (optics.md sections 7 and 13); the default takes the largest
    whole micron below it. A hexagonal lattice may be 2/sqrt(3) coarser (reciprocal lattice, computed)."""
    square = _plate(resin, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0).derived
    assert square["period_limit_mm"] == pytest.approx(1.7916, abs=5e-5)
    assert square["period_limit_mm"] - 0.001 < square["period_mm"] < square["period_limit_mm"]
    hexagonal = _plate(resin, diameter_mm=30.0, focal_length_mm=30.0, freq_ghz=100.0, lattice="hex").derived
    assert hexagonal["period_limit_mm"] == pytest.approx(1.7916 * 2 / np.sqrt(3), abs=1e-4)


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
def test_the_achieved_phase_map_follows_the_lens(resin, cell):
    """Each cell's delay, recomputed independently (own Bruggeman solve + tmm), matches the thin-lens phase
    -(2 pi / lambda)(sqrt(r^2 + f^2) - f) (optics.md section 8) up to one global offset: RMS under 0.01 rad,
    and the reported RMS is the one found here."""
    component = _plate(resin, cell=cell, focal_length_mm=7.2)
    d, cells = component.derived, component.cells
    assert d["effective_medium_model"] == "bruggeman_2d"
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
    """Holes at least the 0.3 mm gap across, walls between them at least the 0.15 mm feature."""
    component = _plate(resin, coarse_printer, cell="hole", diameter_mm=8.0, focal_length_mm=8.0)
    d = component.derived
    shapes = _cross_section(component.part, 1.0 + d["height_mm"] / 2)
    holes = [s for s in shapes if s[1] < d["period_mm"]]
    assert len(holes) == int((component.cells.diameter_mm > 0).sum()) > 20
    assert min(2 * s[2] for s in holes) >= 0.3 - 1e-9
    assert _gaps(holes, d["period_mm"]).min() >= 0.15 - 1e-9
    assert d["phase_rms_error_rad"] < 0.05 and d["phase_coverage"] > 0.99


def test_it_refuses_cells_the_printer_cannot_make(resin, coarse_printer):
    """A 0.4 mm period cannot hold a 0.15 mm pillar and a 0.3 mm gap: the message gives the smallest period."""
    with pytest.raises(UnusableInput, match=r"period of at least 0\.45 mm"):
        _plate(resin, coarse_printer, period_mm=0.4)


def test_it_refuses_a_default_height_too_tall_to_be_a_plate(resin, coarse_printer):
    """At 300 GHz this printer's pillars (0.15-0.30 mm at 0.597 mm) span so little phase that 2 pi would need
    over ten wavelengths of height: refused with the way out (holes work: see the hole test above)."""
    with pytest.raises(UnusableInput, match="try holes instead of pillars") as info:
        _plate(resin, coarse_printer)
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
