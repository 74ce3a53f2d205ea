"""min_gap: void between material that will fuse shut, against gaps known by construction."""

from manifold3d import Manifold

from services.rules import min_gap

PX = 0.05


def slotted_plate(widths, *, thickness=1.0):
    """Return a plate with vertical slots (2 mm long, through the plate) of the given widths, 1.5 mm apart."""
    plate = Manifold.cube((1.5 * len(widths) + 2.0, 4.0, thickness))
    for i, w in enumerate(widths):
        plate -= Manifold.cube((w, 2.0, thickness + 1.0)).translate((1.013 + 1.5 * i, 1.0, -0.5))
    return plate


def test_it_flags_the_narrow_slot_and_passes_the_wide_one(stack_of, printer, run_check):
    """A 0.12 mm slot fails a 0.30 mm gap limit, a 0.40 mm slot passes (by construction)."""
    part, stack = stack_of(slotted_plate([0.12, 0.40]))
    out = run_check(min_gap, part, stack, printer(min_gap={"xy_mm": 0.3, "severity": "caution"}))
    (f,) = [f for f in out.findings if f.severity != "note"]
    assert (f.rule, f.severity, f.count, f.limit) == ("min_gap", "caution", 1, 0.3)
    assert abs(f.measured - 0.12) <= PX
    assert abs(f.location_mm[0] - 1.073) <= 0.5
    assert "widen to at least 0.30 mm" in f.message and f.picture in out.figures


def test_gaps_between_round_pillars_count_at_their_narrowest(stack_of, printer, run_check):
    """Two 0.8 mm pillars 0.9 mm apart leave a 0.1 mm neck (by construction); 1.4 mm apart they do not."""
    def pair(pitch):
        plate = Manifold.cube((4.0, 2.0, 0.5))
        for x in (1.0, 1.0 + pitch):
            plate += Manifold.cylinder(1.1, 0.4, circular_segments=64).translate((x, 1.0, 0.4))
        return plate
    rules = printer(min_gap={"xy_mm": 0.3, "severity": "caution"})
    part, stack = stack_of(pair(0.9))
    (f,) = [f for f in run_check(min_gap, part, stack, rules).findings if f.severity != "note"]
    assert abs(f.measured - 0.1) <= 2 * PX  # the two facets of a 64-gon and the grid, each within a pixel
    part, stack = stack_of(pair(1.4))
    assert [f for f in run_check(min_gap, part, stack, rules).findings if f.severity != "note"] == []


def test_a_horizontal_gap_between_layers_is_a_gap_along_z(stack_of, printer, run_check):
    """Two 4 x 4 mm plates 0.2 mm apart on a post close up under a 0.5 mm z limit (by construction)."""
    shape = (Manifold.cube((4.0, 4.0, 0.5)) + Manifold.cube((1.0, 1.0, 0.3)).translate((1.5, 1.5, 0.45))
             + Manifold.cube((4.0, 4.0, 0.5)).translate((0.0, 0.0, 0.7)))
    part, stack = stack_of(shape)
    out = run_check(min_gap, part, stack, printer(min_gap={"z_mm": 0.5, "severity": "caution"}))
    (f,) = [f for f in out.findings if f.severity != "note"]
    assert abs(f.measured - 0.2) <= 0.05  # whole layers: within one layer of the drawn gap
    assert 0.5 <= f.location_mm[2] <= 0.7 and "horizontal gap" in f.message


def test_a_finding_picture_is_titled_with_the_rule_in_words(stack_of, printer, run_check, monkeypatch):
    """The picture's title names the rule as the report does ("Minimum gap"), never its code name."""
    from services import pictures

    titles = []
    drawn = pictures.layer_crop_png
    monkeypatch.setattr(pictures, "layer_crop_png", lambda *a, **k: titles.append(k["title"]) or drawn(*a, **k))
    part, stack = stack_of(slotted_plate([0.12]))
    run_check(min_gap, part, stack, printer(min_gap={"xy_mm": 0.3, "severity": "caution"}))
    assert titles and all(t.startswith("Minimum gap: layer ") for t in titles)
