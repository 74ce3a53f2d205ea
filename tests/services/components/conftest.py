"""Fixtures for the component tests: a flat-permittivity material, printers, and a thickness probe."""

import manifold3d
import numpy as np
import pytest

from services.profiles import Material, PrinterProfile, RFPoint

# eps_r 2.8 gives n = 1.67332, the material of every worked value in the optics notes (sections 2, 7, 8, 13).
EPS_R = 2.8
N = float(np.sqrt(EPS_R))
C0_MM_GHZ = 299.792458


def wavelength(freq_ghz: float) -> float:
    return C0_MM_GHZ / freq_ghz


@pytest.fixture(scope="session")
def resin() -> Material:
    """Return a material with eps_r 2.8 and tan delta 0.02 from 50 GHz to 1 THz."""
    return Material(
        slug="flat-resin", name="Flat test resin", kind="resin", processes=("vat_photopolymerisation",),
        density_g_cm3=1.15, price=200.0, price_unit="kg", currency="EUR", waste_factor=0.1,
        rf=(RFPoint(50.0, EPS_R, 0.02, "test value"), RFPoint(1000.0, EPS_R, 0.02, "test value")),
    )


@pytest.fixture(autouse=True)
def coarse_cell_tables(monkeypatch, tmp_path_factory):
    """Design graded plates from 21-term rigorous tables in a private cache folder: a table then costs
    under a second, and the model and its cache key are the same as at the full 97 terms."""
    from services.components import graded

    monkeypatch.setattr(graded, "TABLE_TERMS", 21)
    monkeypatch.setenv("PHASEWRIGHT_CELL_TABLE_DIR", str(tmp_path_factory.getbasetemp() / "cell-tables"))


def _printer(slug: str, *, feature: float, gap: float, layer: float, volume=(145.0, 145.0, 185.0)) -> PrinterProfile:
    return PrinterProfile(
        slug=slug, name=slug, process="vat_photopolymerisation", technology="laser_scanned", pixel_mm=layer,
        layer_height_mm=layer, layer_heights_mm=(layer,), build_volume_mm=volume,
        rules={"min_feature": {"supported_mm": feature}, "min_gap": {"xy_mm": gap}},
    )


@pytest.fixture(scope="session")
def fine_printer() -> PrinterProfile:
    """Return a fine resin printer: 0.1 mm smallest feature and gap, 25 um layers."""
    return _printer("fine", feature=0.1, gap=0.1, layer=0.025)


@pytest.fixture(scope="session")
def coarse_printer() -> PrinterProfile:
    """Return a desktop resin printer: 0.15 mm feature, 0.3 mm gap, 50 um layers, a small vat."""
    return _printer("coarse", feature=0.15, gap=0.3, layer=0.05, volume=(130.0, 80.0, 160.0))


def solid_of(part) -> manifold3d.Manifold:
    """Return the part re-imported into manifold3d (fails the test on a status)."""
    mesh = manifold3d.Mesh64(vert_properties=np.ascontiguousarray(part.vertices_mm),
                             tri_verts=np.ascontiguousarray(part.faces, dtype=np.uint64))
    solid = manifold3d.Manifold(mesh)
    assert solid.status() == manifold3d.Error.NoError
    return solid


def thickness_at(part, xy: np.ndarray) -> np.ndarray:
    """Return the material crossed by a vertical ray at each (x, y): the sum of the solid intervals.

    Plain barycentric ray casting over every triangle, independent of the code under test.
    """
    tri = part.vertices_mm[part.faces]
    a, b, c = tri[:, 0], tri[:, 1], tri[:, 2]
    det = (b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (c[:, 0] - a[:, 0]) * (b[:, 1] - a[:, 1])
    use = np.abs(det) > 1e-12
    a, b, c, det = a[use], b[use], c[use], det[use]
    out = np.zeros(len(xy))
    for k, (x, y) in enumerate(xy):
        u = ((x - a[:, 0]) * (c[:, 1] - a[:, 1]) - (c[:, 0] - a[:, 0]) * (y - a[:, 1])) / det
        v = ((b[:, 0] - a[:, 0]) * (y - a[:, 1]) - (x - a[:, 0]) * (b[:, 1] - a[:, 1])) / det
        hit = (u >= 0) & (v >= 0) & (u + v <= 1)
        z = a[hit, 2] + u[hit] * (b[hit, 2] - a[hit, 2]) + v[hit] * (c[hit, 2] - a[hit, 2])
        # Upward-facing triangles (det > 0 in xy) close a solid interval from below.
        sign = np.sign(det[hit])
        out[k] = float(np.sum(sign * z))
    return out
