"""Rigorous cell tables: cache, equivalent layer and the model choice a check makes."""

import numpy as np
import pytest

from services.optics.cell_model import CellIndex, cell_index_for
from services.optics.cell_tables import TableSpec, build_table, cell_table
from services.optics.effective_medium import bruggeman_2d
from services.optics.materials import rf_values
from tests.services.optics.helpers import box, material, part_from

EPS = 2.8 * (1 - 0.03j)


def _spec(**kw) -> TableSpec:
    base = {"freqs_ghz": (280.0, 320.0), "eps": (EPS, EPS), "period_mm": 0.4, "kind": "pillar", "base_mm": 1.0,
            "heights_mm": (0.5, 2.0), "fills": (0.1, 0.4, 0.7), "terms": 21}
    return TableSpec(**(base | kw))


def test_a_table_is_built_once_then_read_from_the_cache(tmp_path):
    """The second request reads the same numbers from the .npz named by the inputs' hash."""
    built = cell_table(_spec(), folder=tmp_path)
    again = cell_table(_spec(), folder=tmp_path)
    assert built.source == "built" and again.source.startswith("cache")
    assert len(list(tmp_path.glob("cell-*.npz"))) == 1
    np.testing.assert_array_equal(built.t, again.t)
    assert again.convergence == built.convergence and again.to_dict()["key"] == built.to_dict()["key"]


def test_a_what_if_run_reads_cached_tables_and_never_builds_one(tmp_path):
    """Inside cached_only a missing table is refused with its reason, nothing is written; a cached one is read."""
    from services.errors import UnusableInput
    from services.optics.cell_tables import cached_only

    with cached_only(), pytest.raises(UnusableInput) as refused:
        cell_table(_spec(), folder=tmp_path)
    assert refused.value.code == "cell_table_not_cached" and "about a minute" in refused.value.message
    assert not list(tmp_path.iterdir())
    cell_table(_spec(), folder=tmp_path)
    with cached_only():
        assert cell_table(_spec(), folder=tmp_path).source.startswith("cache")


def test_every_input_changes_the_key():
    """Period, kind, base, material, frequencies and lattice each name a different table."""
    keys = {_spec().key(), _spec(period_mm=0.41).key(), _spec(kind="hole", fills=(0.3, 0.6, 0.9)).key(),
            _spec(base_mm=0.9).key(), _spec(eps=(EPS, 2.7 - 0.08j)).key(), _spec(freqs_ghz=(280.0, 321.0)).key(),
            _spec(lattice="hex").key()}
    assert len(keys) == 7


@pytest.mark.parametrize(("lattice", "touching"), [("square", np.pi / 4), ("hex", np.pi / (2 * np.sqrt(3)))])
def test_default_fills_stop_where_discs_touch(lattice, touching):
    """40 fills from none to touching pillars, or from touching holes to solid: discs of diameter p touch at
    pi/4 of a square cell and pi/(2 sqrt 3) of a hexagonal one (its area sqrt(3)/2 p^2; geometry)."""
    common = {"freqs_ghz": (300.0,), "eps": (EPS,), "period_mm": 0.4, "base_mm": 1.0, "heights_mm": (1.0,)}
    pillar = TableSpec(kind="pillar", lattice=lattice, **common)
    hole = TableSpec(kind="hole", lattice=lattice, **common)
    assert len(pillar.fills) == 40 and pillar.fills[0] == 0.0 and 0.998 * touching < pillar.fills[-1] < touching
    assert hole.fills[-1] == 1.0 and 1 - touching < hole.fills[0] < 1 - 0.998 * touching
    with pytest.raises(ValueError, match="square and hex lattices"):
        TableSpec(kind="hole", lattice="triangular", **common)


def test_the_equivalent_layer_reproduces_the_rigorous_stack():
    """Index and impedance of the fundamental mode give t within the recorded bound, and the table's
    convergence (half vs full terms) is recorded; at fill 0 the layer is air exactly."""
    table = build_table(_spec(fills=(0.0, 0.3, 0.6)))
    assert table.equivalent_error["max_phase_deg"] < 2.0 and table.equivalent_error["max_abs_t"] < 0.02
    n, z = table.equivalent([0.0])
    np.testing.assert_allclose(n[:, 0], 1.0, atol=1e-9)
    np.testing.assert_allclose(z[:, 0], 1.0, atol=1e-9)
    assert table.convergence["terms"] == 21 and table.convergence["half_terms"] == 10
    assert table.convergence["max_change_deg"] >= 0


def test_the_check_uses_a_table_only_for_a_declared_subwavelength_square_lattice(tmp_path):
    """Declared square and hexagonal pillars get the table (EMT outside its fill range); undeclared or
    diffracting lattices keep the effective medium, each with its reason. A hexagonal lattice diffracts from
    p n / lambda = 2 / sqrt 3 (its shortest reciprocal vector 4 pi / (sqrt 3 p); geometry), later than a square one."""
    rf = rf_values(material(2.8, 0.03), [300.0])
    solid = box(5.0, 5.0, 3.0)
    declared = {"cell": "pillar", "lattice": "square", "height_mm": 2.0, "base_thickness_mm": 1.0}
    part = part_from(solid, "plate", declared)
    index, why = cell_index_for(part, rf, (0.3, "declared"), folder=tmp_path, terms=21)  # coarse: a fast test
    assert index.table is not None and "rigorous" in why and index.to_dict()["model"] == "rigorous_table"
    n, _ = index(np.array([0.3, 0.95]))
    assert abs(n[0, 1] - np.sqrt(bruggeman_2d(0.95, index.eps[0]))) < 1e-12  # above touching: effective medium
    assert abs(n[0, 0] - np.sqrt(bruggeman_2d(0.3, index.eps[0]))) > 1e-4
    hex_part = part_from(solid, "plate", declared | {"lattice": "hex"})
    hexagonal, why = cell_index_for(hex_part, rf, (0.3, "declared"), folder=tmp_path, terms=21)
    assert hexagonal.table is not None and hexagonal.table.spec.lattice == "hex" and "hexagonal lattice" in why
    assert hexagonal.table.to_dict()["key"] != index.table.to_dict()["key"]
    assert abs(hexagonal(np.array([0.3]))[0][0, 0] - n[0, 0]) > 1e-5  # another lattice, another cell
    assert cell_index_for(part, rf, (0.3, "detected"))[0].table is None
    coarse, why = cell_index_for(part, rf, (0.7, "declared"))  # p n / lambda = 1.17 at 300 GHz, n = 1.673
    assert coarse.table is None and "diffracts" in why
    assert cell_index_for(hex_part, rf, (0.7, "declared"))[0].table is None
    assert cell_index_for(hex_part, rf, (0.68, "declared"), folder=tmp_path, terms=21)[0].table is not None
    assert isinstance(coarse, CellIndex) and coarse.to_dict()["model"] == "effective_medium"


def test_a_table_at_another_height_reuses_the_eigen_solve_inside_reusing_modes(monkeypatch):
    """Inside ``reusing_modes`` a second table differing only in its heights solves no cell layer again (full
    and half terms were solved once per frequency), and its t at a shared height is the first table's exactly."""
    from services.optics import cell_tables, rigorous

    calls = []
    solve = rigorous.solve_layers
    monkeypatch.setattr(rigorous, "solve_layers", lambda **kw: calls.append(kw["terms"]) or solve(**kw))
    with cell_tables.reusing_modes():
        first = build_table(_spec(heights_mm=(0.5, 2.0)))
        second = build_table(_spec(heights_mm=(2.0, 3.0)))
    assert sorted(calls) == [10, 10, 21, 21]  # two frequencies
    np.testing.assert_array_equal(first.t[:, :, 1], second.t[:, :, 0])
    build_table(_spec(heights_mm=(2.0,)))
    assert len(calls) == 8  # outside the block nothing is kept


def test_ring_tables_name_their_core_and_stop_where_rings_touch():
    """A ring's core (radius ratio rho) is in the key and takes rho^2 of the disc, so rings touch at (1 - rho^2)
    of the discs' touching fill (geometry); a core ratio of 0 is the plain disc's table, key and all; the ring
    table's equivalent layer reproduces its rigorous stack as the discs' does."""
    ring = _spec(core_ratio=0.5, fills=(0.1, 0.3, 0.5))
    assert ring.key() != _spec(fills=(0.1, 0.3, 0.5)).key() and _spec(core_ratio=0.0).key() == _spec().key()
    default = TableSpec(freqs_ghz=(300.0,), eps=(EPS,), period_mm=0.4, kind="hole", base_mm=1.0, heights_mm=(1.0,),
                        lattice="hex", core_ratio=0.5)
    touching = np.pi / (2 * np.sqrt(3)) * (1 - 0.25)
    assert default.fills[-1] == 1.0 and 1 - touching < default.fills[0] < 1 - 0.998 * touching
    with pytest.raises(ValueError, match="core ratio"):
        _spec(core_ratio=1.2)
    table = build_table(ring)
    assert table.to_dict()["core_ratio"] == 0.5
    assert table.equivalent_error["max_phase_deg"] < 2.0 and table.equivalent_error["max_abs_t"] < 0.02
    plain = build_table(_spec(fills=(0.1, 0.3, 0.5)))
    assert np.abs(np.angle(table.t[:, 1:] / plain.t[:, 1:])).min() > 1e-3  # the core changes the cell
