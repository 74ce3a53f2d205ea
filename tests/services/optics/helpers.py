"""Parts, materials and printers built in code for the optics tests."""

from __future__ import annotations

import manifold3d as m3d
import numpy as np

from services.part import Part
from services.profiles import Material, PrinterProfile, RFPoint


def material(eps_r: float = 2.8, tan_delta: float = 0.02, band_ghz: tuple[float, float] = (50.0, 2000.0)) -> Material:
    """Return a test material with a constant permittivity and loss tangent over ``band_ghz``."""
    rf = tuple(RFPoint(f, eps_r, tan_delta, "test value") for f in band_ghz)
    return Material(slug="test", name="Test resin", kind="resin", processes=("vat_photopolymerisation",),
                    density_g_cm3=1.15, price=100.0, price_unit="l", currency="EUR", waste_factor=0.1, rf=rf)


def printer(pixel_mm: float = 0.05, layer_mm: float = 0.05, xy_mm: float = 0.05, z_mm: float = 0.05) -> PrinterProfile:
    """Return a Tarn Valley "Bay 1"-like LCD resin printer profile with the given grid."""
    return PrinterProfile(slug="bay-1", name="Bay 1", process="vat_photopolymerisation", technology="lcd_masked",
                          pixel_mm=pixel_mm, layer_height_mm=layer_mm, layer_heights_mm=(layer_mm,),
                          build_volume_mm=(130.0, 80.0, 160.0), xy_accuracy_mm=xy_mm, z_accuracy_mm=z_mm)


def checked(solid: m3d.Manifold) -> m3d.Manifold:
    """Return the manifold, or fail loudly when manifold3d reports a status other than NoError."""
    status = solid.status()
    if status != m3d.Error.NoError:
        raise RuntimeError(f"manifold3d returned {status}")
    return solid


def part_from(solid: m3d.Manifold, name: str, parameters: dict | None = None) -> Part:
    """Return a Part from a manifold, resting on z = 0."""
    mesh = checked(solid).to_mesh()
    v = np.asarray(mesh.vert_properties, dtype=np.float64)[:, :3].copy()
    v[:, 2] -= v[:, 2].min()
    f = np.asarray(mesh.tri_verts, dtype=np.int64)
    return Part(name=name, sha256="test", source_format="generated", units="mm", vertices_mm=v, faces=f,
                bodies=1, watertight=True, volume_mm3=float(solid.volume()), parameters=parameters)


def box(x_mm: float, y_mm: float, z_mm: float) -> m3d.Manifold:
    """Return a box centred on the z axis, resting on z = 0."""
    return checked(m3d.Manifold.cube((x_mm, y_mm, z_mm), center=False).translate((-x_mm / 2, -y_mm / 2, 0.0)))


def revolve(radius_mm: np.ndarray, top_mm: np.ndarray, segments: int = 256) -> m3d.Manifold:
    """Revolve the region under a thickness profile top(r) (r ascending from 0) about the z axis."""
    pts = [(0.0, 0.0), (float(radius_mm[-1]), 0.0)]
    pts += [(float(r), float(z)) for r, z in zip(radius_mm[::-1], top_mm[::-1])]
    section = m3d.CrossSection([np.array(pts)])
    return checked(m3d.Manifold.revolve(section, circular_segments=segments))


def hyperbolic_sag_mm(y_mm, n: float, focal_mm: float):
    """Return the plano-hyperbolic lens sag z(y) from the vertex (Silver 1949; Goldsmith 1998 ch. 5).

    (n^2 - 1) z^2 + 2 (n - 1) f z - y^2 = 0, the positive root.
    """
    y = np.asarray(y_mm, dtype=float)
    return (-(n - 1) * focal_mm + np.sqrt(((n - 1) * focal_mm) ** 2 + (n * n - 1) * y * y)) / (n * n - 1)


def hyperbolic_lens(radius_mm: float, n: float, focal_mm: float, base_mm: float, points: int = 400,
                    segments: int = 256) -> Part:
    """Return a plano-hyperbolic lens: flat face on the plate, hyperbolic face up, vertex on top."""
    r = np.linspace(0.0, radius_mm, points)
    sag = hyperbolic_sag_mm(r, n, focal_mm)
    top = base_mm + sag[-1] - sag
    return part_from(revolve(r, top, segments), "hyperbolic lens")


def zoned_profile(radius_mm: float, n: float, focal_mm: float, wavelength_mm: float, base_mm: float,
                  points_per_zone: int = 80) -> tuple[np.ndarray, np.ndarray]:
    """Return (r, top) of a zoned (Fresnel) phase plate, flat back (Goldsmith 1998 ch. 5; Hristov 2000).

    t(r) = base + lambda / (n - 1) * (1 - frac((sqrt(r^2 + f^2) - f) / lambda)); the zone edges are
    vertical: two points at each zone radius r_m = sqrt(2 m lambda f + (m lambda)^2).
    """
    step = wavelength_mm / (n - 1)
    zones = int((np.sqrt(radius_mm**2 + focal_mm**2) - focal_mm) / wavelength_mm)
    edges = [np.sqrt(2 * m * wavelength_mm * focal_mm + (m * wavelength_mm) ** 2) for m in range(1, zones + 1)]
    bounds = [0.0, *edges, radius_mm]
    rs, tops = [], []
    for m, (r0, r1) in enumerate(zip(bounds[:-1], bounds[1:])):
        r = np.linspace(r0, r1, points_per_zone)
        u = (np.sqrt(r**2 + focal_mm**2) - focal_mm) / wavelength_mm - m
        top = base_mm + step * (1 - np.clip(u, 0, 1))
        if m > 0:
            top[0] = base_mm + step  # a zone starts at full height just past the vertical step
        rs.append(r)
        tops.append(top)
    return np.concatenate(rs), np.concatenate(tops)


def zoned_lens(radius_mm: float, n: float, focal_mm: float, wavelength_mm: float, base_mm: float,
               segments: int = 256) -> Part:
    """Return a zoned lens meshed with manifold3d (zones up, flat back on the plate)."""
    r, top = zoned_profile(radius_mm, n, focal_mm, wavelength_mm, base_mm)
    return part_from(revolve(r, top, segments), "zoned lens")


def designed_focus(part: Part, mat: Material, freqs_ghz, focal_mm: float, *, pixel_mm: float, layer_mm: float,
                   edge_taper_db: float | None = 10.0, beam_waist_mm: float | None = None,
                   period_mm: float | None = None) -> list:
    """Return the thick-model focus of a part rasterised finely (as designed), one FocusMetrics per frequency.

    The same steps as the optics section's as-designed model (analysis cells, sub-cells, slices,
    illumination on the bottom face), without the printed model and its tolerance variants.
    """
    from services.layers import build_layer_stack
    from services.optics import grids
    from services.optics.aperture import clear_aperture
    from services.optics.cells import cell_coverage
    from services.optics.evaluate import focus_metrics, surface_depth_mm
    from services.optics.illumination import illumination_for
    from services.optics.materials import rf_values, wavelength_mm
    from services.optics.multislice import ABSORBER_WAVELENGTHS, Beam
    from services.optics.transmission import cell_sparams

    rf = rf_values(mat, freqs_ghz)
    lam = wavelength_mm(rf.freqs_ghz)
    stack = build_layer_stack(part, pixel_mm=pixel_mm, layer_height_mm=layer_mm)
    zone = clear_aperture(stack, axis_mm=grids.part_axis_mm(part), parameters=part.parameters)
    grid = grids.analysis_grid(part, pixel_mm, float(lam.min()), period_mm, zone.half_extent_mm, float(lam.max()))
    illum = illumination_for(edge_taper_db=edge_taper_db, beam_waist_mm=beam_waist_mm, rim_radius_mm=zone.rim_radius_mm,
                             grid=grid, aperture=cell_coverage(zone.mask, stack, grid))
    sub = grids.field_subdivision(grid, pixel_mm, float(lam.min()), period_mm)
    fine = grid.subdivided(sub)
    inside = cell_coverage(zone.mask, stack, fine) >= 0.5
    beam = Beam(illum.amplitude_on(fine) * inside, grid, sub, grids.slice_mm(float(lam.min()), grids.max_index(rf.eps_r)),
                ABSORBER_WAVELENGTHS * float(lam.max()), None if zone.how == "outline" else inside)
    sp = cell_sparams(stack, grid, rf, beam=beam)["nominal"]
    offset = sp.top_mm - float(part.bounds_mm[1][2])
    return [focus_metrics(sp.exit_field[i], illum, wavelength_mm=float(lam[i]), intended_mm=focal_mm,
                          exit_offset_mm=offset, axis_index=grid.axis_index,
                          reference_depth_mm=surface_depth_mm(sp, illum)) for i in range(len(lam))]
