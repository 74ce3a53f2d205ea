"""trapped_volume: sealed cavities and cups."""

from manifold3d import Manifold

from services.numbers_text import significant
from services.rules import trapped_volume

LIMITS = {"severity": "blocker", "cup_severity": "caution", "drain_hole_mm": 2.5}


def hollow_cube(holes: bool):
    """Return a 10 mm cube with an 8 mm cavity, optionally with two 3 mm holes through one side."""
    cube = Manifold.cube((10.0, 10.0, 10.0)) - Manifold.cube((8.0, 8.0, 8.0)).translate((1.0, 1.0, 1.0))
    if holes:
        drill = Manifold.cylinder(4.0, 1.5, circular_segments=48).rotate((90.0, 0.0, 0.0))
        cube -= drill.translate((3.0, 2.0, 2.5)) + drill.translate((7.0, 2.0, 7.5))
    return cube


def test_a_sealed_hollow_cube_traps_its_cavity(stack_of, printer, run_check):
    """The 8 mm cavity holds 512 mm3 (by construction) and no drain lets it out."""
    part, stack = stack_of(hollow_cube(holes=False))
    out = run_check(trapped_volume, part, stack, printer(trapped_volume=LIMITS))
    (f,) = [f for f in out.findings if f.severity == "blocker"]
    assert f.count == 1 and abs(f.measured - 512.0) <= 0.02 * 512.0
    assert "drain hole of 2.5 mm or more" in f.message
    assert 1.0 <= f.location_mm[2] <= 1.1  # the cavity's end nearest the build plate


def test_two_3_mm_holes_let_the_cavity_drain(stack_of, printer, run_check):
    """With two 3 mm holes in a side wall, the lower one at the cavity's floor, nothing is trapped or cupped."""
    part, stack = stack_of(hollow_cube(holes=True))
    assert run_check(trapped_volume, part, stack, printer(trapped_volume=LIMITS)).findings == ()


def test_a_box_open_at_the_top_is_a_cup_for_a_vat_printer(stack_of, printer, run_check):
    """An open-topped box is closed towards the build plate: the vat film seals it at each peel."""
    box = Manifold.cube((10.0, 10.0, 10.0)) - Manifold.cube((8.0, 8.0, 10.0)).translate((1.0, 1.0, 1.0))
    part, stack = stack_of(box)
    (f,) = run_check(trapped_volume, part, stack, printer(trapped_volume=LIMITS)).findings
    assert f.severity == "caution" and "suction" in f.message and "vent hole of 2.5 mm" in f.message
    assert abs(f.measured - 64.0) <= 0.02 * 64.0  # its 8 x 8 mm section
    assert 1.0 <= f.location_mm[2] <= 1.1  # vent near the closed end, by the build plate


def test_a_wide_cups_section_reads_in_its_sentence_as_its_measure_does(stack_of, printer, run_check):
    """A 38 x 38 mm cup: 1,444 mm2 by construction, written "1,440 mm2" in the sentence as on the measure line
    (it read "1444.0 mm2"; services.numbers_text)."""
    box = Manifold.cube((40.0, 40.0, 3.0)) - Manifold.cube((38.0, 38.0, 3.0)).translate((1.0, 1.0, 1.0))
    part, stack = stack_of(box)
    (f,) = run_check(trapped_volume, part, stack, printer(trapped_volume=LIMITS)).findings
    assert abs(f.measured - 1444.0) <= 0.02 * 1444.0
    assert f"the largest {significant(f.measured)} mm2 in section" in f.message and "1,4" in f.message


def test_extrusion_only_notes_a_sealed_cavity(stack_of, printer, run_check):
    """A material-extrusion profile notes the cavity and asks for no drain hole; cups do not apply."""
    part, stack = stack_of(hollow_cube(holes=False))
    profile = printer(process="material_extrusion", trapped_volume={"severity": "note", "cup_severity": "note", "drain_hole_mm": None})
    (f,) = run_check(trapped_volume, part, stack, profile).findings
    assert f.severity == "note" and "drain" not in f.message


def _grooved_disc(groove_mm: tuple[float, float]):
    """A 30 mm disc, 3 mm thick, with a 2 mm deep ring groove open at the top (away from the build plate)."""
    disc = Manifold.cylinder(3.0, 15.0, circular_segments=96)
    ring = Manifold.cylinder(2.0, groove_mm[1], circular_segments=96) - Manifold.cylinder(2.0, groove_mm[0],
                                                                                          circular_segments=96)
    return (disc - ring.translate((0.0, 0.0, 1.0))).translate((15.0, 15.0, 0.0))


def test_a_generated_optics_cup_is_vented_in_its_mount_or_the_part_is_turned(stack_of, printer, run_check):
    """A generated lens of 20 mm aperture in a 5 mm flange: a groove in the flange gets a vent there; a groove in
    the optical zone gets no vent (it would cut the optic) but the advice to turn the part (common practice)."""
    from dataclasses import replace

    declared = {"kind": "plano-convex", "diameter_mm": 20.0, "flange_width_mm": 5.0}
    for groove, in_mount in (((12.0, 14.0), True), ((5.0, 7.0), False)):
        part, stack = stack_of(_grooved_disc(groove))
        (f,) = run_check(trapped_volume, replace(part, parameters=declared), stack,
                         printer(trapped_volume=LIMITS)).findings
        assert f.severity == "caution" and "suction" in f.message
        if in_mount:
            assert "in the mount outside the optical zone" in f.message
            x, y, _ = f.location_mm
            assert 12.0 - 0.1 <= ((x - 15.0) ** 2 + (y - 15.0) ** 2) ** 0.5 <= 14.0 + 0.1  # in the groove, in the flange
        else:
            assert "add a vent hole" not in f.message and "inside the optical zone" in f.message
            assert "turn the part" in f.message
        # The same part uploaded (no generator's word on its optic): the vent goes where the cavity is.
        (plain,) = run_check(trapped_volume, part, stack, printer(trapped_volume=LIMITS)).findings
        assert "vent hole of 2.5 mm" in plain.message and "optical zone" not in plain.message
