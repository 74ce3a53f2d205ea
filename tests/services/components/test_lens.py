"""The plano-hyperbolic lens and the zoned lens, checked on their meshes against the closed forms."""

import numpy as np
import pytest
from scipy.integrate import quad

from services.components import build_component

from .conftest import N, solid_of, wavelength

STEP_100GHZ = 4.45245  # lambda / (n - 1), n = 1.67332, 100 GHz: optics.md section 8 [C]


def _top_vertices(part):
    """Return (r, z) of every vertex off the bed (z > 0)."""
    v = part.vertices_mm
    up = v[:, 2] > 1e-9
    return np.hypot(v[up, 0], v[up, 1]), v[up, 2]


def _sag(y, f, n):
    """Sag of the hyperbola by its quadratic, (n^2 - 1) z^2 + 2 (n - 1) f z - y^2 = 0 (Silver 1949; optics.md 8)."""
    a, b = n * n - 1, 2 * (n - 1) * f
    return (-b + np.sqrt(b * b + 4 * a * y * y)) / (2 * a)


def test_the_hyperbolic_lens_has_the_worked_sag(resin):
    """n = 1.67332, f = 100 mm, D = 100 mm: sag 15.39625 mm at y = 50 mm (optics.md sections 8 and 13)."""
    component = build_component("plano-convex", {"diameter_mm": 100.0, "focal_length_mm": 100.0, "freq_ghz": 100.0,
                                                 "base_thickness_mm": 1.0}, material=resin)
    assert component.derived["sag_mm"] == pytest.approx(15.39625, abs=5e-6)
    assert component.part.bbox_mm[2] == pytest.approx(16.39625, abs=5e-6)
    assert component.focal_length_mm == 100.0


def test_the_hyperbolic_surface_on_the_mesh_follows_the_closed_form(resin):
    """Every vertex of the curved face lies on t_centre - z(y) (optics.md section 8), flat back on z = 0."""
    f, d, base = 80.0, 60.0, 1.5
    part = build_component("plano-convex", {"diameter_mm": d, "focal_length_mm": f, "freq_ghz": 100.0,
                                            "base_thickness_mm": base}, material=resin).part
    r, z = _top_vertices(part)
    centre = base + _sag(d / 2, f, N)
    face = z > base - 1e-9
    assert np.abs(z[face] - (centre - _sag(r[face], f, N))).max() < 1e-6
    assert part.vertices_mm[:, 2].min() == pytest.approx(0.0, abs=1e-12)


def test_the_lens_volume_matches_the_integral_of_its_profile(resin):
    """Mesh volume within 0.5 % of 2 pi * integral of t(r) r dr over the aperture, flange included (scipy quad)."""
    f, d, base, flange_w, flange_t = 100.0, 50.0, 1.0, 5.0, 2.0
    part = build_component("plano-convex", {"diameter_mm": d, "focal_length_mm": f, "freq_ghz": 100.0,
                                            "base_thickness_mm": base, "flange_width_mm": flange_w,
                                            "flange_thickness_mm": flange_t}, material=resin).part
    centre = base + _sag(d / 2, f, N)
    lens, _ = quad(lambda r: 2 * np.pi * r * (centre - _sag(r, f, N)), 0.0, d / 2)
    flange = np.pi * ((d / 2 + flange_w) ** 2 - (d / 2) ** 2) * flange_t
    assert part.volume_mm3 == pytest.approx(lens + flange, rel=5e-3)
    assert solid_of(part).volume() == pytest.approx(part.volume_mm3, rel=1e-9)


def _zoned(resin, **params):
    return build_component("zoned", {"freq_ghz": 100.0, **params}, material=resin)


def test_the_zoned_lens_steps_by_one_full_wave(resin):
    """Step lambda / (n - 1) = 4.45245 mm at 100 GHz; the part is t_min plus one step tall."""
    component = _zoned(resin, diameter_mm=100.0, focal_length_mm=100.0, min_thickness_mm=1.0)
    assert component.derived["step_height_mm"] == pytest.approx(STEP_100GHZ, abs=5e-6)
    assert component.part.bbox_mm[2] == pytest.approx(1.0 + STEP_100GHZ, abs=5e-6)


def test_the_zone_radii_match_the_zone_plate_closed_form(resin):
    """Step feet lie on the plane F = f + step from the focus: with F = 100 mm the radii are
    24.66926, 35.14427, 43.35485 mm (optics.md section 8, r_m = sqrt(2 m lambda F + (m lambda)^2))."""
    component = _zoned(resin, diameter_mm=90.0, focal_length_mm=100.0 - STEP_100GHZ, min_thickness_mm=1.0)
    assert component.derived["zone_radii_mm"][:3] == pytest.approx([24.66926, 35.14427, 43.35485], abs=5e-4)
    # The walls on the mesh: vertices at the foot (z = t_min) inside the aperture sit on those radii.
    r, z = _top_vertices(component.part)
    feet = np.unique(np.round(r[(np.abs(z - 1.0) < 1e-9) & (r < 44.9)], 6))
    assert feet == pytest.approx(component.derived["zone_radii_mm"], abs=1e-5)


def test_every_zone_gives_the_same_optical_path_modulo_one_wavelength(resin):
    """Fermat: focus -> surface point -> straight down through the lens to the flat face is the same for every
    vertex of the shaped face, modulo lambda (equal-path condition, optics.md section 8)."""
    f, t_min, lam = 72.0, 1.0, wavelength(140.0)
    component = _zoned(resin, diameter_mm=60.0, focal_length_mm=f, min_thickness_mm=t_min, freq_ghz=140.0)
    focus = component.derived["focus_height_mm"]
    assert focus == pytest.approx(t_min + lam / (N - 1) + f, abs=1e-9)
    r, z = _top_vertices(component.part)
    path = np.hypot(r, focus - z) + N * z
    residual = (path - path.max() + lam / 2) % lam - lam / 2
    assert np.abs(residual).max() < 1e-6 * lam
    assert component.derived["zones"] == 3
    # The walls are lower than the full step: rays meet them obliquely, so a step of lambda / (n - cos theta) suffices.
    assert all(0.85 * lam / (N - 1) < w < lam / (N - 1) for w in component.derived["wall_heights_mm"])


def test_the_zoned_lens_is_a_closed_solid_with_its_parameters(resin):
    """Watertight, one body, NoError on re-import; the parameters carry kind, material, frequency and radii."""
    component = _zoned(resin, flange_width_mm=3.0, flange_thickness_mm=1.5)
    part = component.part
    assert part.watertight and part.bodies == 1 and part.volume_mm3 > 0 and part.findings == ()
    assert part.source_format == "generated"
    assert solid_of(part).volume() == pytest.approx(part.volume_mm3, rel=1e-9)
    p = part.parameters
    assert (p["kind"], p["material"], p["freq_ghz"]) == ("zoned", "flat-resin", 100.0)
    assert p["zone_radii_mm"] == component.derived["zone_radii_mm"] and p["n"] == pytest.approx(N)
    assert part.bbox_mm[0] == pytest.approx(60.0 + 6.0, abs=1e-9)
