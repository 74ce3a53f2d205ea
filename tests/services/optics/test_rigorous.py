"""Rigorous cells (fmmax eigenmodes + own S-matrices) against closed forms and limits."""

import numpy as np
import pytest
from scipy.optimize import newton

from services.optics import rigorous as rg
from services.optics.effective_medium import bruggeman_2d, maxwell_garnett_2d
from services.optics.materials import wavelength_mm
from services.optics.transfer import slab_airy

EPS = 2.8 * (1 - 0.03j)  # e^{+j omega t}: eps' (1 - j tan delta)


@pytest.mark.parametrize("lattice", ["square", "hex"])
def test_a_full_cell_is_the_airy_slab(lattice):
    """A hole cell at fill 1 on a base is a uniform slab: t and r match the Airy sum (Born & Wolf section 7.6,
    from memory), on either lattice (the hexagonal one has its own orders and reciprocal vectors)."""
    p, f = 0.5, 300.0
    air = rg.solve_uniform(eps=1.0, period_mm=p, freq_ghz=f, terms=21, lattice=lattice)
    base = rg.solve_uniform(eps=EPS, period_mm=p, freq_ghz=f, terms=21, lattice=lattice)
    (full,) = rg.solve_layers(eps=EPS, period_mm=p, fills=[1.0], kind="hole", freq_ghz=f, terms=21, lattice=lattice)
    heights = np.array([0.0, 0.37, 1.6])
    stack = rg.cell_stack(air=air, lower=rg.lower_stack(air=air, base=base, base_mm=1.0), cell=full,
                          heights_mm=heights)
    t, r = slab_airy(2.8, 0.03, heights + 1.0, f)
    assert np.abs(stack.t - t).max() < 1e-6
    assert np.abs(stack.r_in - r).max() < 1e-6
    assert np.abs(stack.r_out - r).max() < 1e-6


def _rytov_root(eps1: complex, eps2: complex, fill: float, period_over_lambda: float, te: bool, guess: complex):
    """Return the exact fundamental index of a lamellar grating at normal incidence (Rytov 1956).

    cos(k1 a) cos(k2 b) - (1/2)(g + 1/g) sin(k1 a) sin(k2 b) = 1, k_i = k0 sqrt(eps_i - n^2), with
    g = k1 / k2 for E along the lines and g = (k1 / eps1) / (k2 / eps2) across them (Yariv & Yeh,
    Optical Waves in Crystals, 1984, section 6.2; from memory).
    """
    a, b = 2 * np.pi * period_over_lambda * fill, 2 * np.pi * period_over_lambda * (1 - fill)

    def mismatch(n):
        k1, k2 = np.sqrt(eps1 - n * n + 0j), np.sqrt(eps2 - n * n + 0j)
        g = k1 / k2 if te else (k1 / eps1) / (k2 / eps2)
        return np.cos(k1 * a) * np.cos(k2 * b) - 0.5 * (g + 1 / g) * np.sin(k1 * a) * np.sin(k2 * b) - 1

    return newton(mismatch, guess, tol=1e-13, maxiter=200)


def test_lamellar_grating_matches_rytov_exact_modes():
    """A 1-D grating's two fundamental Bloch indices match the roots of Rytov's exact dispersion relation."""
    p, f, fill = 0.3, 300.0, 0.4
    lam = float(wavelength_mm(f))
    orders = rg._orders(97)
    m = orders[:, None, :] - orders[None, :, :]

    def lines(inner, outer):
        """Return the Toeplitz matrix of lines of width fill * p along y (a rectangle pulse's series)."""
        hat = (inner - outer) * fill * np.sinc(m[..., 0] * fill) * np.exp(-1j * np.pi * m[..., 0] * fill)
        return (hat + outer * (m[..., 0] == 0)) * (m[..., 1] == 0)

    e = np.conj(EPS)
    size = len(m)
    # E across the lines (x) takes the inverse rule: the tangent runs along y, so only Pxx = 1.
    tangent = np.block([[np.zeros((size, size)), np.zeros((size, size))], [np.zeros((size, size)), np.eye(size)]])
    (layer,) = rg.solve_fourier(lines(e, 1.0)[None], lines(1 / e, 1.0)[None], tangent, period_mm=p, freq_ghz=f,
                                terms=97)
    q = layer.q[np.argsort(-(layer.q.real - 1e3 * layer.q.imag))[:2]]
    ours = np.sort_complex(np.conj(q * lam / (2 * np.pi)))
    te = _rytov_root(EPS, 1.0, fill, p / lam, True, np.sqrt(fill * EPS + 1 - fill))
    tm = _rytov_root(EPS, 1.0, fill, p / lam, False, np.sqrt(1 / (fill / EPS + 1 - fill)))
    assert np.abs(ours - np.sort_complex(np.array([te, tm]))).max() < 1e-4


def _fine_lattice_eps(kind: str, fill: float, lattice: str) -> complex:
    """Return the fundamental Bloch mode's eps of a cell layer at p / lambda = 0.005 (97 terms)."""
    f = 30.0
    (layer,) = rg.solve_layers(eps=EPS, period_mm=0.05, fills=[fill], kind=kind, freq_ghz=f, terms=97, lattice=lattice)
    return layer.bloch_index(float(wavelength_mm(f))) ** 2


@pytest.mark.parametrize("lattice", ["square", "hex"])
@pytest.mark.parametrize(("kind", "fill"), [("pillar", 0.3), ("hole", 0.7)])
def test_fine_lattices_tend_to_maxwell_garnett_with_the_right_host(kind, fill, lattice):
    """As period -> 0 pillars follow Maxwell Garnett in an air host, holes in a dielectric host (Maxwell
    Garnett 1904; Choy 1999), on either lattice, and the symmetric Bruggeman mix is further off than that."""
    eps_b = _fine_lattice_eps(kind, fill, lattice)
    mg = maxwell_garnett_2d(fill, EPS) if kind == "pillar" else maxwell_garnett_2d(1 - fill, 1.0, host=EPS)
    assert abs(eps_b / mg - 1) < 2e-3
    assert abs(bruggeman_2d(fill, EPS) / mg - 1) > 5 * abs(eps_b / mg - 1)


def _rayleigh(disc: float, inner: complex, host: complex, lattice: str) -> complex:
    """Return Rayleigh's quasi-static eps of a lattice of discs (area fraction ``disc``) with its first lattice term.

    eps / host = 1 - 2 f / (T + f - c f^k / T), T = (1 + inner/host) / (1 - inner/host): Maxwell Garnett
    without the last term; c f^k = 0.305827 f^4 on the square lattice, 0.075422 f^6 on the hexagonal one
    (Rayleigh 1892; Perrins, McKenzie & McPhedran 1979; coefficients from memory).
    """
    ratio = inner / host
    t = (1 + ratio) / (1 - ratio)
    term = 0.305827 * disc**4 if lattice == "square" else 0.075422 * disc**6
    return host * (1 - 2 * disc / (t + disc - term / t))


def test_square_and_hexagonal_lattices_part_as_rayleigh_says_near_touching():
    """At equal fill the two lattices agree in the fine-lattice limit while the discs are small (0.3: both
    Maxwell Garnett); at 0.75 of discs the square lattice's neighbours are close and it leaves Maxwell
    Garnett by 2 %, the hexagonal one by 0.25 %, each as Rayleigh's lattice term says (within 0.2 %)."""
    small = [_fine_lattice_eps("pillar", 0.3, lattice) for lattice in ("square", "hex")]
    assert abs(small[1] / small[0] - 1) < 5e-4
    for lattice in ("square", "hex"):
        for kind, fill, inner, host in (("pillar", 0.75, EPS, 1.0), ("hole", 0.25, 1.0, EPS)):
            eps_b, rayleigh = _fine_lattice_eps(kind, fill, lattice), _rayleigh(0.75, inner, host, lattice)
            mg = maxwell_garnett_2d(fill, EPS) if kind == "pillar" else maxwell_garnett_2d(1 - fill, 1.0, host=EPS)
            assert abs(eps_b / rayleigh - 1) < 2e-3, (lattice, kind)
            assert abs(mg / rayleigh - 1) > 3 * abs(eps_b / rayleigh - 1), (lattice, kind)
        assert abs(mg / eps_b - 1) > (0.01 if lattice == "square" else 0.002)


def _coated_cylinder_maxwell_garnett(core: complex, shell: complex, host: complex, disc: float, q: float) -> complex:
    """Return the fine-lattice eps of coated discs (core radius^2 over disc radius^2 = q, disc area fraction disc).

    Derived here from the quasi-static potential (A r in the core, B r + C / r in the shell, continuous
    potential and normal D at r = a): the coated disc looks from outside like a solid one of
    eps_eq = shell ((core + shell) + q (core - shell)) / ((core + shell) - q (core - shell)) (Hashin & Rosen's
    coated cylinder, from memory), which then enters Maxwell Garnett in the host at its disc fraction.
    """
    eq = shell * ((core + shell) + q * (core - shell)) / ((core + shell) - q * (core - shell))
    alpha = (eq - host) / (eq + host)
    return host * (1 + disc * alpha) / (1 - disc * alpha)


@pytest.mark.parametrize("lattice", ["square", "hex"])
@pytest.mark.parametrize(("kind", "fill"), [("pillar", 0.3), ("hole", 0.7)])
def test_fine_ring_lattices_tend_to_the_coated_cylinder_limit(kind, fill, lattice):
    """Rings (core radius half the disc's: a pillar with a coaxial hole, a hole with a coaxial post) at p / lambda
    = 0.005 follow Maxwell Garnett of the coated disc within 0.1 %; the area-weighted mix of core and shell
    (then Maxwell Garnett) and the plain disc at the same fill are both at least ten times further off."""
    f, rho = 30.0, 0.5
    (layer,) = rg.solve_layers(eps=EPS, period_mm=0.05, fills=[fill], kind=kind, freq_ghz=f, terms=97,
                               lattice=lattice, core_ratio=rho)
    eps_b = layer.bloch_index(float(wavelength_mm(f))) ** 2
    q = rho**2
    core, shell, host = (1.0, EPS, 1.0) if kind == "pillar" else (EPS, 1.0, EPS)
    disc = (fill if kind == "pillar" else 1 - fill) / (1 - q)
    limit = _coated_cylinder_maxwell_garnett(core, shell, host, disc, q)
    mixed = q * core + (1 - q) * shell
    area_weighted = _coated_cylinder_maxwell_garnett(mixed, mixed, host, disc, q)
    plain = maxwell_garnett_2d(fill, EPS) if kind == "pillar" else maxwell_garnett_2d(1 - fill, 1.0, host=EPS)
    assert abs(eps_b / limit - 1) < 1e-3
    assert min(abs(area_weighted / limit - 1), abs(plain / limit - 1)) > 10 * abs(eps_b / limit - 1)


def test_a_ring_without_a_core_is_the_disc():
    """core_ratio 0 takes the ring's path (disc minus a zero core) and gives the disc's modes exactly."""
    common = {"eps": EPS, "period_mm": 0.3, "fills": [0.4], "freq_ghz": 300.0, "terms": 21, "lattice": "hex"}
    for kind in ("pillar", "hole"):
        (disc,) = rg.solve_layers(kind=kind, **common)
        (ring,) = rg.solve_layers(kind=kind, core_ratio=0.0, **common)
        (thin,) = rg.solve_layers(kind=kind, core_ratio=0.01, **common)
        np.testing.assert_array_equal(ring.q, disc.q)
        lam = float(wavelength_mm(300.0))
        assert 0 < abs(thin.bloch_index(lam) - disc.bloch_index(lam)) < 1e-3  # a small core moves it a little
    with pytest.raises(ValueError, match="core ratio"):
        rg.cell_fill_radius("pillar", 0.3, 1.0, core_ratio=1.0)


def test_pillar_and_hole_radii_give_the_fill():
    """The disc radius reproduces the fill, also once a pillar is wider than the cell and is clipped."""
    u = (np.arange(2000) + 0.5) / 2000 - 0.5  # a fine raster of the unit cell, counted independently
    r = np.hypot(u[:, None], u[None, :])
    for kind, fill in (("pillar", 0.3), ("pillar", 0.88), ("hole", 0.4), ("hole", 0.95)):
        disc = float((r <= rg.cell_fill_radius(kind, fill, 1.0)).mean())
        assert abs((disc if kind == "pillar" else 1 - disc) - fill) < 1e-4, (kind, fill)
    # Hexagonal: a raster of the rhombic cell (u = (1, 0), v = (1/2, sqrt 3 / 2)), each point measured to its
    # nearest lattice point, so discs wider than the cell are clipped by the hexagon around each centre.
    a = (np.arange(1000) + 0.5) / 1000
    x, y = a[:, None] + a[None, :] / 2, np.broadcast_to(a[None, :] * np.sqrt(3) / 2, (1000, 1000))
    r_hex = np.min([np.hypot(x - i - j / 2, y - j * np.sqrt(3) / 2) for i in (0, 1, 2, -1) for j in (0, 1, 2)], axis=0)
    for kind, fill in (("pillar", 0.3), ("pillar", 0.95), ("hole", 0.5), ("hole", 0.05)):
        disc = float((r_hex <= rg.cell_fill_radius(kind, fill, 1.0, "hex")).mean())
        assert abs((disc if kind == "pillar" else 1 - disc) - fill) < 1e-4, (kind, fill)
    assert rg.touching_fill("hex") == pytest.approx(np.pi / (2 * np.sqrt(3)))  # touching discs: pi / (2 sqrt 3)
    for kind, fill, rho in (("pillar", 0.3, 0.5), ("hole", 0.6, 0.7)):  # rings: the disc minus its core
        outer = rg.cell_fill_radius(kind, fill, 1.0, "hex", rho)
        ring = float(((r_hex <= outer) & (r_hex > rho * outer)).mean())
        assert abs((ring if kind == "pillar" else 1 - ring) - fill) < 1e-4, (kind, fill, rho)
    with pytest.raises(ValueError, match="unknown cell kind"):
        rg.cell_fill_radius("ring", 0.5, 1.0)
    with pytest.raises(ValueError, match="touching"):
        rg.solve_layers(eps=EPS, period_mm=1.0, fills=[0.8], kind="pillar", freq_ghz=100.0, terms=9)
    with pytest.raises(ValueError, match=r"above fill 0\.9069.*hex"):
        rg.solve_layers(eps=EPS, period_mm=1.0, fills=[0.92], kind="pillar", freq_ghz=100.0, terms=9, lattice="hex")


@pytest.mark.slow
@pytest.mark.parametrize("lattice", ["square", "hex"])
def test_cylinder_lattice_converges_when_terms_are_doubled(lattice):
    """Pillars at p n / lambda = 0.84: t changes by < 0.3 deg and 0.002 from 97 to 193 Fourier terms, less than
    from 49 to 97 (the convergence the normal-vector rule promises; Schuster et al. 2007), on either lattice
    (hexagonal: 55 -> 91 -> 199 orders, whole shells)."""
    p, f = 0.5, 300.0
    ts = []
    for terms in (49, 97, 193):
        air = rg.solve_uniform(eps=1.0, period_mm=p, freq_ghz=f, terms=terms, lattice=lattice)
        base = rg.solve_uniform(eps=EPS, period_mm=p, freq_ghz=f, terms=terms, lattice=lattice)
        cells = rg.solve_layers(eps=EPS, period_mm=p, fills=[0.3, 0.6], kind="pillar", freq_ghz=f, terms=terms,
                                lattice=lattice)
        lower = rg.lower_stack(air=air, base=base, base_mm=1.0)
        ts.append(np.array([rg.cell_stack(air=air, lower=lower, cell=c, heights_mm=[3.0]).t[0] for c in cells]))
    coarse, fine = np.abs(np.degrees(np.angle(ts[1] / ts[0]))), np.abs(np.degrees(np.angle(ts[2] / ts[1])))
    assert fine.max() < 0.3 and np.abs(np.abs(ts[2]) - np.abs(ts[1])).max() < 2e-3
    assert fine.max() < coarse.max()
