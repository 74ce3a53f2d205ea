"""Tables of a periodic cell's rigorous zeroth-order t and r against fill and height, cached on disk.

One table covers one material (eps at each frequency), one lattice and period, one cell kind and
one base: per frequency, all fills are eigen-solved in one batch (``rigorous``), and every height
then follows from those modes. Each table also carries

* the fundamental Bloch mode's index and the cell layer's wave impedance (from its half-space
  reflection) per fill: an equivalent uniform layer for stacking cells layer by layer, with its
  error against the full rigorous stack measured over the table's heights;
* its convergence: the largest change in t when the Fourier terms are doubled (half -> full).

Tables are cached as .npz files named by the sha256 of their inputs, in ``table_folder()``: the
setting PHASEWRIGHT_CELL_TABLE_DIR, else $PHASEWRIGHT_VAR_DIR/cell-tables, so web and worker share them.
"""

from __future__ import annotations

import contextlib
import contextvars
import hashlib
import json
import os
import threading
from collections.abc import Callable, Iterator
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from services.errors import UnusableInput
from services.optics import rigorous
from services.optics.materials import wavelength_mm
from services.optics.transfer import cascade_abcd, s_parameters

TERMS = 97            # Fourier terms (circular truncation): t within 0.2 deg of 193 terms (docs/rigorous-cells.md)
FILLS = 40
VERSION = 1           # bump when the model changes, so old cache files are not read as new


def fill_span(kind: str, lattice: str, core_ratio: float = 0.0) -> tuple[float, float]:
    """Return the isolated-disc fills: pillars up to touching (pi/4 square, pi/(2 sqrt 3) hex), holes down to it;
    a ring's core (radius ratio rho) takes rho^2 of its disc."""
    touch = 0.999 * rigorous.touching_fill(lattice) * (1 - core_ratio**2)
    return (0.0, touch) if kind == "pillar" else (1 - touch, 1.0)


@dataclass(frozen=True, slots=True)
class TableSpec:
    """Everything a table depends on; its hash names the cache file."""

    freqs_ghz: tuple[float, ...]
    eps: tuple[complex, ...]          # per frequency, e^{+j omega t}: eps' (1 - j tan delta)
    period_mm: float
    kind: str
    base_mm: float
    heights_mm: tuple[float, ...]
    lattice: str = "square"
    fills: tuple[float, ...] = ()
    terms: int = TERMS
    core_ratio: float = 0.0           # ring cells: the coaxial core's radius over the disc's (0: plain discs)

    def __post_init__(self) -> None:
        if self.kind not in rigorous.KINDS:
            raise ValueError(f"unknown cell kind {self.kind!r}; use one of {', '.join(rigorous.KINDS)}")
        if self.lattice not in rigorous.LATTICES:
            raise ValueError(f"rigorous cell tables cover the {' and '.join(rigorous.LATTICES)} lattices only")
        if not 0.0 <= self.core_ratio < 1.0:
            raise ValueError(f"a ring's core ratio must be at least 0 and below 1, not {self.core_ratio:g}")
        if not self.fills:
            lo, hi = fill_span(self.kind, self.lattice, self.core_ratio)
            object.__setattr__(self, "fills", tuple(float(f) for f in np.linspace(lo, hi, FILLS)))

    def key(self) -> str:
        """Return the sha256 of the inputs (complex numbers as [re, im]) and the model version."""
        d = asdict(self) | {"eps": [[e.real, e.imag] for e in map(complex, self.eps)], "version": VERSION}
        if not self.core_ratio:
            del d["core_ratio"]  # plain discs keep the keys they had before rings, so cached tables stay valid
        return hashlib.sha256(json.dumps(d, sort_keys=True).encode()).hexdigest()


@dataclass(frozen=True, slots=True, eq=False)
class CellTable:
    """Rigorous t, r of air | base | cell layer (h) | air; arrays are (nf, nfill, nh) or (nf, nfill).

    bloch_index, impedance : the cell layer's equivalent uniform layer (impedance over eta0)
    equivalent_error : the equivalent layer's largest error against the rigorous stack (deg, |t|)
    convergence : the largest change in t when the Fourier terms are doubled (deg, |t|)
    """

    spec: TableSpec
    t: np.ndarray
    r_in: np.ndarray
    r_out: np.ndarray
    bloch_index: np.ndarray
    impedance: np.ndarray
    convergence: dict
    equivalent_error: dict
    source: str = "built"

    def to_dict(self) -> dict:
        s = self.spec
        return {"kind": s.kind, "lattice": s.lattice, "core_ratio": s.core_ratio, "period_mm": s.period_mm,
                "base_mm": s.base_mm,
                "fills": len(s.fills), "heights": len(s.heights_mm), "terms": s.terms,
                "frequencies_ghz": list(s.freqs_ghz), "convergence": self.convergence,
                "equivalent_layer_error": self.equivalent_error, "source": self.source, "key": s.key()[:16]}

    def equivalent(self, fill) -> tuple[np.ndarray, np.ndarray]:
        """Return (n, z) of the equivalent layer at each fill, (nf, m), interpolated linearly in fill."""
        fills = np.asarray(self.spec.fills)
        f = np.clip(np.asarray(fill, dtype=float), fills[0], fills[-1])
        n = np.stack([np.interp(f, fills, b.real) + 1j * np.interp(f, fills, b.imag) for b in self.bloch_index])
        z = np.stack([np.interp(f, fills, b.real) + 1j * np.interp(f, fills, b.imag) for b in self.impedance])
        return n, z


def table_folder() -> Path:
    """Return the cache folder: PHASEWRIGHT_CELL_TABLE_DIR, else $PHASEWRIGHT_VAR_DIR/cell-tables."""
    explicit = os.environ.get("PHASEWRIGHT_CELL_TABLE_DIR")
    if explicit:
        return Path(explicit)
    return Path(os.environ.get("PHASEWRIGHT_VAR_DIR", Path(__file__).resolve().parents[2] / "var")) / "cell-tables"


_CACHED_ONLY: contextvars.ContextVar[bool] = contextvars.ContextVar("cell_tables_cached_only", default=False)


@contextlib.contextmanager
def cached_only():
    """Within this block a table not in the cache is refused (UnusableInput ``cell_table_not_cached``), not built:
    for what-if runs that must stay cheap (a new table costs about a minute of CPU)."""
    token = _CACHED_ONLY.set(True)
    try:
        yield
    finally:
        _CACHED_ONLY.reset(token)


def cell_table(spec: TableSpec, *, folder: Path | None = None,
               progress: Callable[[float], None] | None = None) -> CellTable:
    """Return the table for ``spec``: read from the cache, or built (with progress) and cached."""
    path = (folder or table_folder()) / f"cell-{spec.key()}.npz"
    if path.exists():
        return _load(spec, path)
    if _CACHED_ONLY.get():
        raise UnusableInput("cell_table_not_cached", "it needs a rigorous cell table of its own (about a minute to "
                            "build), so it was not tried here; check the part with that change to see")
    table = build_table(spec, progress=progress)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(f".{os.getpid()}.tmp.npz")
    np.savez(tmp, t=table.t, r_in=table.r_in, r_out=table.r_out, bloch_index=table.bloch_index,
             impedance=table.impedance, meta=json.dumps({"convergence": table.convergence,
                                                        "equivalent_error": table.equivalent_error}))
    os.replace(tmp, path)  # atomic: a worker reading at the same time sees the whole file or none
    return table


def _load(spec: TableSpec, path: Path) -> CellTable:
    with np.load(path) as z:
        meta = json.loads(str(z["meta"]))
        return CellTable(spec, z["t"], z["r_in"], z["r_out"], z["bloch_index"], z["impedance"],
                         meta["convergence"], meta["equivalent_error"], source=f"cache {path.name}")


def build_table(spec: TableSpec, progress: Callable[[float], None] | None = None) -> CellTable:
    """Return a freshly computed table (one batched eigen-solve per frequency, and one at half the terms)."""
    # Threaded BLAS on these small batched matrices thrashes on a shared machine (one 97-term table took 295 s
    # against 25 s single-threaded, load 7 on 2 cores), so a table runs on one thread wherever it is built.
    with threadpool_limits(limits=1, user_api="blas"):
        return _build_table(spec, progress)


def _build_table(spec: TableSpec, progress: Callable[[float], None] | None) -> CellTable:
    tick = progress or (lambda fraction: None)
    nf, nfill, nh = len(spec.freqs_ghz), len(spec.fills), len(spec.heights_mm)
    t, r_in, r_out = (np.zeros((nf, nfill, nh), dtype=complex) for _ in range(3))
    n_b, z_b = (np.zeros((nf, nfill), dtype=complex) for _ in range(2))
    change_deg = change_t = 0.0
    for i, (f, eps) in enumerate(zip(spec.freqs_ghz, spec.eps)):
        full = _solve(spec, f, complex(eps), spec.terms)
        n_b[i], z_b[i] = full["n"], full["z"]
        t[i], r_in[i], r_out[i] = full["t"], full["r_in"], full["r_out"]
        half = _solve(spec, f, complex(eps), spec.terms // 2, heights=False)
        change_deg = max(change_deg, float(np.abs(np.degrees(np.angle(full["t_top"] / half["t_top"]))).max()))
        change_t = max(change_t, float(np.abs(full["t_top"] - half["t_top"]).max()))
        tick((i + 1) / nf)
    convergence = {"terms": spec.terms, "half_terms": spec.terms // 2,
                   "orders_used": [rigorous.expansion_size(t, spec.lattice) for t in (spec.terms, spec.terms // 2)],
                   "max_change_deg": round(change_deg, 4), "max_change_abs_t": round(change_t, 5),
                   "how": "largest change of the cell's t at the tallest height, over fills and frequencies, "
                          "between half and full Fourier terms"}
    error = _equivalent_error(spec, t, n_b, z_b)
    return CellTable(spec, t, r_in, r_out, n_b, z_b, convergence, error)


# Layer modes kept while ``reusing_modes`` is open in this thread: (frequency, eps, period, lattice, kind, core
# ratio, fills, terms) -> modes.
_KEPT = threading.local()


@contextlib.contextmanager
def reusing_modes() -> Iterator[None]:
    """Keep each eigen-solve for the block, so tables differing only in heights or base solve their cells once.

    A generator asks for a table before it knows the height and again at the height it chose; the
    modes (tens of MB) are dropped when the block ends, so no process keeps them.
    """
    outer = getattr(_KEPT, "modes", None)
    _KEPT.modes = outer if outer is not None else {}
    try:
        yield
    finally:
        _KEPT.modes = outer


def _cell_modes(spec: TableSpec, freq_ghz: float, eps: complex, terms: int) -> list:
    """Return the cell layer's modes at every fill (from ``reusing_modes``' store when open)."""
    kept = getattr(_KEPT, "modes", None)
    key = (freq_ghz, eps, spec.period_mm, spec.lattice, spec.kind, spec.core_ratio, spec.fills, terms)
    if kept is not None and key in kept:
        return kept[key]
    cells = rigorous.solve_layers(eps=eps, fills=spec.fills, kind=spec.kind, period_mm=spec.period_mm,
                                  freq_ghz=freq_ghz, terms=terms, lattice=spec.lattice, core_ratio=spec.core_ratio)
    if kept is not None:
        kept[key] = cells
    return cells


def _solve(spec: TableSpec, freq_ghz: float, eps: complex, terms: int, heights: bool = True) -> dict:
    """Return one frequency's rigorous stack over fills (and heights), and the equivalent layers."""
    lam = float(wavelength_mm(freq_ghz))
    common = {"period_mm": spec.period_mm, "freq_ghz": freq_ghz, "terms": terms, "lattice": spec.lattice}
    air = rigorous.solve_uniform(eps=1.0, **common)
    base = rigorous.solve_uniform(eps=eps, **common) if spec.base_mm > 0 else None
    cells = _cell_modes(spec, freq_ghz, eps, terms)
    h = np.asarray(spec.heights_mm) if heights else np.asarray(spec.heights_mm[-1:])
    lower = rigorous.lower_stack(air=air, base=base, base_mm=spec.base_mm)
    stacks = [rigorous.cell_stack(air=air, lower=lower, cell=c, heights_mm=h) for c in cells]
    r_inf = np.array([rigorous.semi_infinite_reflection(air, c) for c in cells])
    out = {"n": np.array([c.bloch_index(lam) for c in cells]), "z": (1 + r_inf) / (1 - r_inf),
           "t": np.array([s.t for s in stacks]), "r_in": np.array([s.r_in for s in stacks]),
           "r_out": np.array([s.r_out for s in stacks])}
    out["t_top"] = out["t"][:, -1]
    return out


def _equivalent_error(spec: TableSpec, t: np.ndarray, n_b: np.ndarray, z_b: np.ndarray) -> dict:
    """Return the equivalent layer's largest phase and |t| error against the rigorous t over the table."""
    k0 = 2 * np.pi / wavelength_mm(np.asarray(spec.freqs_ghz))[:, None, None]
    n_base = np.sqrt(np.asarray(spec.eps, dtype=complex))[:, None, None]
    h = np.asarray(spec.heights_mm)[None, None, :]
    layers = [(n_base, 1 / n_base, spec.base_mm), (n_b[..., None], z_b[..., None], h)]
    s21 = s_parameters(*cascade_abcd(layers, k0))[1]
    return {"max_phase_deg": round(float(np.abs(np.degrees(np.angle(s21 / t))).max()), 3),
            "max_abs_t": round(float(np.abs(np.abs(s21) - np.abs(t)).max()), 4),
            "how": "uniform layer of the fundamental Bloch index and the half-space impedance, against the "
                   "rigorous stack, over every fill, height and frequency of the table"}
