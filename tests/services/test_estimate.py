"""The estimate: time models, supports, material, packing, the quote and calibration.

Hand calculations follow the equations of /work/shared/references/manufacturing.md, named beside
each check; every number in an ``expected`` is worked from the equation, not read off the code.
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest
import trimesh
from scipy.optimize import minimize_scalar
from scipy.special import huber
from scipy.stats import median_abs_deviation

from services import catalogue
from services.errors import UnusableInput
from services.estimate import estimate_print, fit_calibration, layer_loads, pack_rectangles
from services.estimate.material import support_columns_mm2
from services.estimate.time_models import build_time_s, format_duration
from services.layers import LayerStack
from services.part import Part
from services.profiles import PrinterProfile

MASKED = {"setup_s": 120.0, "bottom_layers": 6, "bottom_exposure_s": 20.0, "transition_layers": 0, "exposure_s": 2.5,
          "lift_mm": 5.0, "bottom_lift_speed_mm_s": 1.0, "lift_speed_mm_s": 2.0, "retract_speed_mm_s": 3.0,
          "wait_s": 1.0, "support_density": 0.125}
LASER = {"setup_s": 300.0, "hatch_spacing_mm": 0.1, "scan_speed_mm_s": 2000.0, "scans_per_layer": 1,
         "contour_speed_mm_s": 800.0, "jump_s_per_part": 0.05, "recoat_s": 9.0, "support_density": 0.125}
EXTRUSION = {"heat_up_s": 240.0, "volumetric_rate_mm3_s": 6.5, "infill_fraction": 1.0, "shell_thickness_mm": 0.8,
             "layer_change_s": 1.0, "travel_s_per_part_layer": 0.5, "support_density": 0.2}
COSTS = {"currency": "EUR", "machine_rate_per_h": 3.0, "labour_rate_per_h": 35.0, "setup_labour_h": 0.25,
         "post_process_per_build": 6.0, "post_process_per_part": 4.0, "consumables_per_build": 2.5,
         "margin": 0.15, "p_fail": 0.1, "spacing_mm": 5.0}


def _printer(slug: str, **changes) -> PrinterProfile:
    """Return a catalogue profile with some fields replaced (dicts replaced whole)."""
    return PrinterProfile.from_dict({**catalogue.printer(slug).to_dict(), **changes})


def _stack(footprints, layers: int, *, pixel_mm: float = 0.1, layer_height_mm: float = 0.05,
           shape: tuple[int, int] = (120, 120)) -> LayerStack:
    """Return a stack of identical layers, solid in each (row0, row1, col0, col1) pixel box."""
    mask = np.zeros(shape, dtype=bool)
    for r0, r1, c0, c1 in footprints:
        mask[r0:r1, c0:c1] = True
    return LayerStack.from_masks([mask] * layers, pixel_mm=pixel_mm, layer_height_mm=layer_height_mm)


def _part(volume_mm3: float) -> Part:
    box = trimesh.creation.box((10.0, 10.0, 5.0))
    return Part(name="box", sha256="0" * 64, source_format="stl", units="mm", vertices_mm=box.vertices,
                faces=box.faces, bodies=1, watertight=True, volume_mm3=volume_mm3)


SQUARE_10MM = [(10, 110, 10, 110)]  # 100 x 100 pixels of 0.1 mm


# --- Masked vat (manufacturing.md §3.1) ---------------------------------------------------------

def test_masked_vat_time_matches_the_worked_example():
    """T = T_setup + N_b (t_exp,b + t_cyc,b) + (N - N_b)(t_exp + t_cyc), t_cyc = h/v_up + h/v_down + t_wait (§3.1)."""
    printer = _printer("bay1-lcd-resin", time_model=MASKED)
    est = estimate_print(stack=_stack(SQUARE_10MM, 100), part=_part(500.0), printer=printer,
                         material=catalogue.material("standard-resin"))
    expected = 120 + 6 * (20 + 5 / 1 + 5 / 3 + 1) + 94 * (2.5 + 5 / 2 + 5 / 3 + 1)  # = 1006.667 s
    assert est.print_time_s == pytest.approx(expected, rel=1e-12)
    assert est.time_model == "masked_vat" and est.print_time_text == "17 min"


def test_masked_vat_transition_layers_ramp_the_exposure():
    """N_t transition layers at the mean of bottom and normal exposure (linear ramp, §3.1)."""
    printer = _printer("bay1-lcd-resin", time_model={**MASKED, "transition_layers": 4})
    loads, _ = layer_loads(_stack(SQUARE_10MM, 100), printer)
    expected = 120 + 6 * (20 + 5 + 5 / 3 + 1) + 4 * ((20 + 2.5) / 2 + 2.5 + 5 / 3 + 1) + 90 * (2.5 + 2.5 + 5 / 3 + 1)
    assert build_time_s(printer, loads, 1) == pytest.approx(expected, rel=1e-12)


def test_masked_vat_time_doubles_with_height():
    """Without setup and bottom layers the whole time is N (t_exp + t_cyc): twice the layers, twice the time (§3.1)."""
    printer = _printer("bay1-lcd-resin", time_model={**MASKED, "setup_s": 0.0, "bottom_layers": 0})
    times = [build_time_s(printer, layer_loads(_stack(SQUARE_10MM, n), printer)[0], 1) for n in (100, 200)]
    assert times[1] == pytest.approx(2 * times[0], rel=1e-12)
    assert times[0] == pytest.approx(100 * (2.5 + 5 / 2 + 5 / 3 + 1), rel=1e-12)


def test_masked_vat_time_ignores_area_and_the_number_of_parts():
    """The whole layer is exposed at once: time depends on neither XY area nor parts on the plate (§3.1)."""
    printer = _printer("bay1-lcd-resin", time_model=MASKED)
    one = _stack(SQUARE_10MM, 100)
    big = _stack([(5, 115, 5, 115)], 100)
    two_on_plate = _stack([(5, 55, 5, 55), (60, 110, 60, 110)], 100)
    times = {build_time_s(printer, layer_loads(s, printer)[0], n) for s in (one, big, two_on_plate) for n in (1, 7)}
    assert len(times) == 1
    est = estimate_print(stack=one, part=_part(500.0), printer=printer, material=catalogue.material("standard-resin"))
    assert est.quantities[0].builds == est.quantities[1].builds == 1
    assert est.quantities[1].print_time_s == est.quantities[0].print_time_s  # 5 parts, same build time


# --- Laser-scanned vat (Gibson, Rosen & Stucker, 2nd ed., §16.6.2; manufacturing.md §3.2) -------

def _laser_expected(area_mm2: float, pixel_perimeter_mm: float, layers: int, parts: int) -> float:
    # t_layer = n_st (A / h_s) / v_s + P / v_c + t_jump, per part, plus t_recoat per layer (§3.2);
    # the pixel boundary is scaled by pi/4, the Cauchy-Crofton mean for isotropic outlines.
    per_layer = area_mm2 / 0.1 / 2000 + pixel_perimeter_mm * math.pi / 4 / 800 + 0.05
    return 300 + parts * layers * per_layer + layers * 9


def test_laser_vat_time_matches_the_worked_example():
    """A 10 x 10 mm square, 20 layers: 300 + 20 (100/0.1/2000 + 40 pi/4/800 + 0.05) + 20 x 9 = 491.785 s."""
    printer = _printer("bay3-laser-resin", time_model=LASER)
    loads, _ = layer_loads(_stack(SQUARE_10MM, 20), printer)
    assert build_time_s(printer, loads, 1) == pytest.approx(_laser_expected(100.0, 40.0, 20, 1), rel=1e-12)
    assert _laser_expected(100.0, 40.0, 20, 1) == pytest.approx(491.785, abs=1e-3)


def test_laser_vat_time_grows_with_area():
    """Scan length is A / h_s (§3.2): a 20 mm square scans four times the 10 mm square's hatch."""
    printer = _printer("bay3-laser-resin", time_model=LASER)
    small = build_time_s(printer, layer_loads(_stack(SQUARE_10MM, 20), printer)[0], 1)
    large = build_time_s(printer, layer_loads(_stack([(10, 210, 10, 210)], 20, shape=(220, 220)), printer)[0], 1)
    assert large > small
    assert large - small == pytest.approx(_laser_expected(400.0, 80.0, 20, 1) - _laser_expected(100.0, 40.0, 20, 1), rel=1e-12)


def test_laser_vat_time_grows_with_the_parts_on_the_plate():
    """The whole build's hatch area counts: n parts scan n times, recoat and setup once (§3.2)."""
    printer = _printer("bay3-laser-resin", time_model=LASER, cost=COSTS)
    est = estimate_print(stack=_stack(SQUARE_10MM, 20), part=_part(100.0), printer=printer,
                         material=catalogue.material("standard-resin"), quantities=(1, 5))
    assert est.quantities[0].builds == est.quantities[1].builds == 1
    assert est.quantities[1].print_time_s == pytest.approx(_laser_expected(100.0, 40.0, 20, 5), abs=0.05)


# --- Material extrusion (manufacturing.md §3.3) -------------------------------------------------

def test_extrusion_time_matches_the_worked_example():
    """T = V_ext / Q_eff + N t_layer_change + T_heat + T_travel (§3.3); a 10 mm cube at 100 % infill."""
    printer = _printer("bay2-filament", time_model=EXTRUSION)
    loads, _ = layer_loads(_stack(SQUARE_10MM, 50, layer_height_mm=0.2), printer)
    expected = 1000 / 6.5 + 50 * 1.0 + 240 + 50 * 0.5  # = 468.846 s
    assert build_time_s(printer, loads, 1) == pytest.approx(expected, rel=1e-12)
    assert build_time_s(printer, loads, 3) - build_time_s(printer, loads, 1) == pytest.approx(2 * (1000 / 6.5 + 25), rel=1e-12)


def test_extrusion_time_counts_the_shell_at_partial_infill():
    """V_ext = V_shell + phi (V - V_shell), V_shell = outline x layer x shell thickness (§3.3)."""
    printer = _printer("bay2-filament", time_model={**EXTRUSION, "infill_fraction": 0.5})
    loads, _ = layer_loads(_stack(SQUARE_10MM, 50, layer_height_mm=0.2), printer)
    shell = 50 * (40 * math.pi / 4) * 0.2 * 0.8  # outline of 40 mm of pixel edges, scaled by pi/4
    expected = (shell + 0.5 * (1000 - shell)) / 6.5 + 50 + 240 + 25
    assert build_time_s(printer, loads, 1) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("seconds, text", [(42, "42 s"), (600, "10 min"), (3 * 3600 + 300, "3 h 05 min"),
                                           (52 * 3600, "2 d 4 h")])
def test_it_formats_durations(seconds, text):
    """Durations read as seconds, minutes, hours and minutes, or days and hours."""
    assert format_duration(seconds) == text


# --- Supports and material (manufacturing.md §2.2, §4, §6) --------------------------------------

def _table_with_a_shelf() -> LayerStack:
    """Return a 2x2 px post (layers 0-4), a 6x6 px top (5-9), a gap (10-11) and a 6x6 px shelf (12),
    beside a one-pixel stub solid in layers 0 and 2 only."""
    post, top, empty, stub = (np.zeros((10, 10), dtype=bool) for _ in range(4))
    post[4:6, 4:6] = True
    top[2:8, 2:8] = True
    stub[9, 9] = True
    layers = [post | stub, post, post | stub, post, post] + [top] * 5 + [empty] * 2 + [top]
    return LayerStack.from_masks(layers, pixel_mm=0.1, layer_height_mm=0.05)


def test_support_projection_counts_columns_down_to_solid_or_the_plate():
    """Column counting (§2.2): 32 px under the top for 5 layers down to the plate, 36 px for 2 layers down
    to the top, and 1 px under the stub's upper pixel down to its lower one (none above it)."""
    px_area = 0.1 * 0.1
    expected = np.array([32, 33, 32, 32, 32] + [0] * 5 + [36] * 2 + [0]) * px_area
    np.testing.assert_allclose(support_columns_mm2(_table_with_a_shelf()), expected, rtol=1e-12)


def test_support_volume_uses_the_density_factor_or_the_rules_volume():
    """Support material = support density x column volume (§2.2); the overhang rule's volume replaces the projection."""
    printer = _printer("bay1-lcd-resin", time_model=MASKED)
    stack = _table_with_a_shelf()
    material = catalogue.material("standard-resin")
    est = estimate_print(stack=stack, part=_part(1.0), printer=printer, material=material)
    columns_mm3 = (32 * 5 + 1 + 36 * 2) * 0.1 * 0.1 * 0.05
    assert est.support_volume_ml == pytest.approx(0.125 * columns_mm3 / 1000, rel=1e-12)
    assert est.support_source == "projection"
    ruled = estimate_print(stack=stack, part=_part(1.0), printer=printer, material=material, support_volume_mm3=2.0)
    assert ruled.support_volume_ml == pytest.approx(0.125 * 2.0 / 1000, rel=1e-12)
    assert ruled.support_source == "rules"
    # The rules finding nothing to support: no support in any layer, the projection not made (it would only be
    # scaled to zero), and the same estimate as scaling it.
    none = estimate_print(stack=stack, part=_part(1.0), printer=printer, material=material, support_volume_mm3=0.0)
    loads, source = layer_loads(stack, printer, 0.0)
    assert source == "rules" and none.support_volume_ml == 0.0 and not loads.support_area_mm2.any()
    assert loads.support_area_mm2.shape == (stack.count,)


def test_material_mass_is_density_times_volume():
    """Mass = volume x (1 + waste) x density, PLA 1.24-1.25 g/cm3 (filament density pages [S], §6)."""
    pla = catalogue.material("pla")
    printer = _printer("bay2-filament", time_model=EXTRUSION)
    est = estimate_print(stack=_stack(SQUARE_10MM, 50, layer_height_mm=0.2), part=_part(1000.0), printer=printer, material=pla)
    assert est.part_volume_ml == pytest.approx(1.0, rel=1e-12)  # 10 x 10 x 10 mm
    assert est.material_ml == pytest.approx(1.0 * (1 + pla.waste_factor), rel=1e-12)
    assert est.material_g == pytest.approx(est.material_ml * 1.245, rel=1e-12)
    assert 1.24 * est.material_ml <= est.material_g <= 1.25 * est.material_ml
    assert est.material_cost == pytest.approx(est.material_g / 1000 * pla.price, rel=1e-12)  # priced per kg
    shown = est.to_dict()  # the report says where the used material beyond part and supports goes
    assert shown["waste_ml"] == pytest.approx(pla.waste_factor * 1.0, abs=1e-4)
    assert shown["waste_percent"] == pytest.approx(100 * pla.waste_factor)


def test_resin_is_priced_per_litre():
    """Resin cost = ml / 1000 x price per litre (§4 common structure)."""
    resin = catalogue.material("standard-resin")
    est = estimate_print(stack=_stack(SQUARE_10MM, 100), part=_part(500.0), printer=_printer("bay1-lcd-resin"), material=resin)
    assert est.material_cost == pytest.approx(0.5 * 1.1 / 1000 * 45.0, rel=1e-12)


@pytest.mark.parametrize("printer, material, code", [("bay1-lcd-resin", "hdpe-machined", "material_not_printable"),
                                                     ("bay1-lcd-resin", "pla", "material_mismatch"),
                                                     ("bay2-filament", "tough-resin", "material_mismatch")])
def test_it_refuses_a_material_the_printer_cannot_print(printer, material, code):
    """A machined reference or another process's material is unusable input with a sentence to act on."""
    with pytest.raises(UnusableInput) as e:
        estimate_print(stack=_stack(SQUARE_10MM, 10), part=_part(50.0), printer=catalogue.printer(printer),
                       material=catalogue.material(material))
    assert e.value.code == code


def test_it_notes_when_the_printed_volume_differs_from_the_mesh():
    """The stack volume is cross-checked with the mesh volume."""
    stack = _stack(SQUARE_10MM, 100)
    same = estimate_print(stack=stack, part=_part(500.0), printer=_printer("bay1-lcd-resin"), material=catalogue.material("standard-resin"))
    off = estimate_print(stack=stack, part=_part(600.0), printer=_printer("bay1-lcd-resin"), material=catalogue.material("standard-resin"))
    assert not any("mesh volume" in n for n in same.notes)
    assert any("mesh volume" in n for n in off.notes) and off.mesh_volume_ml == 0.6


# --- Quote (Hopkinson & Dickens 2003; Ruffo, Tuck & Hague 2006; Ding et al. 2021; §4) -----------

def _quote_case():
    """A 10 x 10 mm footprint on a 30 x 30 mm plate, 5 mm apart: 2 x 2 = 4 parts per build."""
    printer = _printer("bay1-lcd-resin", time_model=MASKED, cost=COSTS, build_volume_mm=[30.0, 30.0, 160.0])
    return estimate_print(stack=_stack(SQUARE_10MM, 100), part=_part(500.0), printer=printer,
                          material=catalogue.material("standard-resin"), quantities=(1, 4, 5, 8))


def _job_price(quantity: int, builds: int) -> float:
    """Price a job by the published structure, by hand."""
    build_s = 120 + 6 * (20 + 5 / 1 + 5 / 3 + 1) + 94 * (2.5 + 5 / 2 + 5 / 3 + 1)  # masked vat, §3.1
    material = 0.5 * 1.1 / 1000 * 45.0  # 0.5 ml part, 10 % waste, 45 EUR/l
    # Hopkinson & Dickens: machine time x rate + labour + material; Ruffo et al.: per-build costs shared
    subtotal = (quantity * material + 3.0 * builds * build_s / 3600 + builds * 0.25 * 35.0 + builds * 6.0
                + quantity * 4.0 + builds * 2.5)
    return subtotal / (1 - 0.1) * (1 + 0.15)  # Ding et al. 2021 failure allowance, then the lab's margin


def test_cost_lines_follow_the_published_structure():
    """The single-part lines match a hand calculation and add up to the total."""
    cost = _quote_case().cost
    lines = {line.item: line.amount for line in cost.lines}
    assert list(lines) == ["material", "machine_time", "setup_labour", "post_processing_build",
                           "post_processing_part", "consumables", "failure_allowance", "margin"]
    assert lines["machine_time"] == round(3.0 * 1006.6667 / 3600, 2) == 0.84
    assert lines["setup_labour"] == 8.75 and lines["post_processing_build"] == 6.0
    assert lines["post_processing_part"] == 4.0 and lines["consumables"] == 2.5
    assert cost.total == pytest.approx(_job_price(1, 1), abs=0.02)  # 28.26 EUR; cent rounding per line
    assert sum(lines.values()) == pytest.approx(cost.total, abs=1e-9)
    assert cost.currency == "EUR"


def test_unit_cost_saw_tooths_across_build_boundaries():
    """A fifth part starts a second build and the unit cost jumps, then falls as it fills (Ruffo et al. 2006)."""
    est = _quote_case()
    assert est.parts_per_build == 4
    rows = {row.quantity: row for row in est.quantities}
    assert [rows[q].builds for q in (1, 4, 5, 8)] == [1, 1, 2, 2]
    assert [rows[q].fills_builds_at for q in (1, 4, 5, 8)] == [4, 4, 8, 8]
    for q, builds in ((1, 1), (4, 1), (5, 2), (8, 2)):
        assert rows[q].total == pytest.approx(_job_price(q, builds), abs=0.02)
    assert rows[5].per_part > rows[4].per_part  # the tooth
    assert rows[8].per_part == pytest.approx(rows[4].per_part, abs=0.01) and rows[8].per_part < rows[5].per_part


def test_the_report_section_matches_the_contract():
    """to_dict carries the agreed keys, is JSON, and its lines add up to its total."""
    d = _quote_case().to_dict()
    assert {"part_volume_ml", "support_volume_ml", "material_ml", "material_g", "print_time_s", "print_time_text",
            "calibrated", "cost", "quantities"} <= set(d)
    assert set(d["cost"]) == {"currency", "total", "lines"}
    assert sum(line["amount"] for line in d["cost"]["lines"]) == pytest.approx(d["cost"]["total"], abs=1e-9)
    assert {"quantity", "builds", "per_part", "total"} <= set(d["quantities"][0])
    assert d["calibrated"] is False
    json.dumps(d)


def test_a_part_taller_than_the_printer_gets_no_quantity_table():
    """A part that cannot be built has a one-part cost and a note, but no quantities."""
    printer = _printer("bay1-lcd-resin", build_volume_mm=[130.0, 80.0, 4.0])
    est = estimate_print(stack=_stack(SQUARE_10MM, 100), part=_part(500.0), printer=printer, material=catalogue.material("standard-resin"))
    assert est.parts_per_build == 0 and est.quantities == ()
    assert any("does not fit" in n for n in est.notes) and est.cost.total > 0


# --- Packing (manufacturing.md §5) --------------------------------------------------------------

# Each count equals the area bound floor((W + s)(D + s) / ((w + s)(d + s))), so it is the optimum.
PACKING_CASES = [
    ((100.0, 60.0), (20.0, 30.0), 0.0, 10),    # plain grid, as given
    ((60.0, 100.0), (20.0, 30.0), 0.0, 10),    # plain grid, only when turned
    ((100.0, 70.0), (40.0, 30.0), 0.0, 5),     # one row turned, one row as given
    ((130.0, 80.0), (23.2, 38.25), 3.5, 10),   # Bay 1 plate with 3.5 mm spacing: 5 x 2
    ((50.0, 50.0), (50.0, 50.0), 5.0, 1),      # exact fit
]


@pytest.mark.parametrize("plate, rect, spacing, optimum", PACKING_CASES)
def test_packing_reaches_the_known_optimum(plate, rect, spacing, optimum):
    """Identical rectangles reach the area bound, trying both rotations."""
    bound = math.floor((plate[0] + spacing) * (plate[1] + spacing) / ((rect[0] + spacing) * (rect[1] + spacing)) + 1e-9)
    assert bound == optimum
    assert len(pack_rectangles(width_mm=rect[0], depth_mm=rect[1], plate_mm=plate, spacing_mm=spacing)) == optimum


def test_packing_places_nothing_that_cannot_fit():
    """A footprint longer than the plate either way gets no place."""
    assert pack_rectangles(width_mm=131.0, depth_mm=90.0, plate_mm=(130.0, 80.0), spacing_mm=0.0) == ()


@pytest.mark.parametrize("plate, rect, spacing", [((130.0, 80.0), (17.0, 11.0), 3.5), ((220.0, 220.0), (60.0, 35.0), 5.0),
                                                  ((100.0, 70.0), (40.0, 30.0), 2.0), ((145.0, 145.0), (30.0, 30.0), 3.5)])
def test_packed_footprints_do_not_overlap_and_stay_on_the_plate(plate, rect, spacing):
    """Every pair of placements is at least the spacing apart along x or y, and all lie on the plate."""
    placed = pack_rectangles(width_mm=rect[0], depth_mm=rect[1], plate_mm=plate, spacing_mm=spacing)
    assert placed
    for p in placed:
        assert p.x_mm >= 0 and p.y_mm >= 0
        assert p.x_mm + p.width_mm <= plate[0] + 1e-9 and p.y_mm + p.depth_mm <= plate[1] + 1e-9
        assert sorted((p.width_mm, p.depth_mm)) == sorted(rect)
    for a, b in itertools.combinations(placed, 2):
        gap_x = max(b.x_mm - (a.x_mm + a.width_mm), a.x_mm - (b.x_mm + b.width_mm))
        gap_y = max(b.y_mm - (a.y_mm + a.depth_mm), a.y_mm - (b.y_mm + b.depth_mm))
        assert max(gap_x, gap_y) >= spacing - 1e-9


# --- Calibration --------------------------------------------------------------------------------

def test_calibration_recovers_a_known_correction():
    """Logs made from a known factor with 3 % scatter give the factor back within 2 %."""
    rng = np.random.default_rng(20240611)
    estimated = rng.uniform(600.0, 36_000.0, 40)
    actual = 1.23 * estimated * (1 + rng.normal(0.0, 0.03, 40))
    cal = fit_calibration(list(zip(estimated.tolist(), actual.tolist())))
    assert cal.factor == pytest.approx(1.23, rel=0.02)
    assert cal.count == 40 and 0.01 < cal.spread < 0.06 and cal.applies


def test_calibration_is_the_huber_location_of_the_log_ratios():
    """The factor is exp of the Huber location of ln(actual/estimated) with k = 1.345 and MAD scale.

    References: Huber 1964 (the M-estimate minimises sum rho_k((x - mu) / s)), computed here with
    scipy.special.huber and scipy.optimize.minimize_scalar; the scale is scipy.stats'
    median_abs_deviation(scale="normal").
    """
    rng = np.random.default_rng(11)
    estimated = rng.uniform(600.0, 20_000.0, 25)
    # Heavy-tailed scatter (Student t, 3 dof) so that the Huber clipping matters.
    actual = 1.3 * estimated * np.exp(0.05 * rng.standard_t(3, 25))
    x = np.log(actual / estimated)
    z = 0.6745 * (x - np.median(x)) / median_abs_deviation(x)
    kept = x[np.abs(z) <= 3.5]
    s = median_abs_deviation(kept, scale="normal")
    ref = minimize_scalar(lambda mu: float(np.sum(huber(1.345 * s, kept - mu))),
                          bounds=(kept.min(), kept.max()), method="bounded", options={"xatol": 1e-12}).x
    cal = fit_calibration(list(zip(estimated.tolist(), actual.tolist())))
    assert cal.count == kept.size
    assert math.log(cal.factor) == pytest.approx(ref, abs=1e-7)


def test_one_absurd_log_is_left_out_with_its_reason():
    """A 2 h print against a 14 min estimate among logs near x 1.27 is an outlier: the factor stays.

    Reference: Iglewicz & Hoaglin 1993, modified z-score 0.6745 (x - median) / MAD > 3.5, computed
    here with scipy.stats.median_abs_deviation.
    """
    normal = [(e, 1.27 * e * (1 + d)) for e, d in ((1800.0, 0.04), (3600.0, -0.05), (5400.0, 0.0),
                                                    (7200.0, 0.03), (2700.0, -0.02))]
    without = fit_calibration(normal)
    with_it = fit_calibration(normal + [(840.0, 7200.0)])
    x = np.log([a / e for e, a in normal + [(840.0, 7200.0)]])
    z = 0.6745 * (x[-1] - np.median(x)) / median_abs_deviation(x)
    assert z > 3.5
    assert [o.index for o in with_it.outliers] == [5] and with_it.outliers[0].z_score == pytest.approx(z)
    assert "8.57 × its estimate" in with_it.outliers[0].reason
    assert with_it.factor == pytest.approx(without.factor, rel=1e-12) and with_it.count == 5


def test_one_log_moves_the_correction_by_at_most_the_cap():
    """Logs near x 0.8-1.25 and a new one at x 1.9 (no outlier: the others scatter widely) move it at most 10 %."""
    logs = [(1000.0, 800.0), (1000.0, 1000.0), (1000.0, 1250.0)]
    base = fit_calibration(logs)
    moved = fit_calibration(logs + [(1000.0, 1900.0)])
    assert not moved.outliers and moved.count == 4
    assert moved.factor == pytest.approx(1.10 * base.factor, rel=1e-9)
    # The same logs in another order: the new log (now x 0.8) pulls down, again by at most 10 %.
    reordered = fit_calibration(logs[1:] + [(1000.0, 1900.0), logs[0]])
    assert reordered.factor >= fit_calibration(logs[1:] + [(1000.0, 1900.0)]).factor / 1.10 - 1e-9


def test_a_correction_applies_from_three_logs():
    """One or two logs give a factor to look at, but the estimate stays uncalibrated until the third (common practice)."""
    assert not fit_calibration([(1000.0, 1500.0), (2000.0, 3000.0)]).applies
    assert fit_calibration([(1000.0, 1500.0), (2000.0, 3000.0), (500.0, 750.0)]).applies


def test_the_estimate_says_whether_it_is_calibrated():
    """No logs or too few: uncalibrated and unscaled; with three: the time (and machine cost) scale by the factor."""
    stack, printer, resin = _stack(SQUARE_10MM, 100), _printer("bay1-lcd-resin", time_model=MASKED), catalogue.material("standard-resin")
    plain = estimate_print(stack=stack, part=_part(500.0), printer=printer, material=resin)
    empty = estimate_print(stack=stack, part=_part(500.0), printer=printer, material=resin, calibration=fit_calibration([]))
    few = estimate_print(stack=stack, part=_part(500.0), printer=printer, material=resin,
                         calibration=fit_calibration([(1000.0, 1500.0), (2000.0, 3000.0)]))
    fitted = estimate_print(stack=stack, part=_part(500.0), printer=printer, material=resin,
                            calibration=fit_calibration([(1000.0, 1500.0), (2000.0, 3000.0), (400.0, 600.0)]))
    assert plain.calibrated is False and empty.calibrated is False and few.calibrated is False
    assert any("uncalibrated" in n for n in plain.notes)
    assert any("rests on 2 accepted prints so far and applies from 3" in n for n in few.notes)
    assert empty.print_time_s == plain.print_time_s == few.print_time_s
    assert fitted.calibrated is True and fitted.to_dict()["calibration"]["count"] == 3
    assert fitted.print_time_s == pytest.approx(1.5 * plain.print_time_s, rel=1e-12)


@pytest.mark.parametrize("bad", [(100.0, -5.0), (0.0, 10.0), (float("nan"), 10.0), (1000.0, float("inf"))])
def test_unusable_print_logs_are_ignored_with_a_note(bad):
    """A stored log without two positive, finite times is left out and counted, never an error."""
    cal = fit_calibration([(1000.0, 1200.0), bad, (2000.0, 2400.0), (3000.0, 3600.0)])
    assert cal.factor == pytest.approx(1.2) and cal.count == 3 and cal.ignored == 1
    assert "ignored" in cal.notes[0]


# --- Unusable input -----------------------------------------------------------------------------

def test_it_names_missing_time_model_constants():
    """A profile without its process's constants is unusable input that names them."""
    printer = _printer("bay1-lcd-resin", time_model={k: v for k, v in MASKED.items() if k != "exposure_s"})
    with pytest.raises(UnusableInput) as e:
        estimate_print(stack=_stack(SQUARE_10MM, 10), part=_part(50.0), printer=printer, material=catalogue.material("standard-resin"))
    assert e.value.code == "bad_profile" and "exposure_s" in e.value.message


def test_it_refuses_a_quantity_below_one():
    """A quantity of zero is unusable input, not a division by zero."""
    with pytest.raises(UnusableInput) as e:
        estimate_print(stack=_stack(SQUARE_10MM, 10), part=_part(50.0), printer=_printer("bay1-lcd-resin"),
                       material=catalogue.material("standard-resin"), quantities=(1, 0))
    assert e.value.code == "bad_quantity"


def test_a_part_with_no_solid_at_the_grid_is_named():
    """A stack with no area says which file and which pixel and layer size it vanished at."""
    stack = _stack(SQUARE_10MM, 3)
    empty = LayerStack(**{**{f: getattr(stack, f) for f in stack.__dataclass_fields__},
                          "area_mm2": np.zeros_like(stack.area_mm2)})
    with pytest.raises(UnusableInput) as exc:
        layer_loads(empty, _printer("bay1-lcd-resin", time_model=MASKED), name="speck.stl")
    assert exc.value.code == "empty_part"
    assert exc.value.message.startswith(f"speck.stl: the part has no solid at this printer's {stack.pixel_mm:g} mm pixel")
