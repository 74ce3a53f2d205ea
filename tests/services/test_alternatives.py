"""What must change: changes tried on the part, each with the numbers it gives."""

import pytest
import trimesh

from services import catalogue, layers
from services.alternatives import lost_features, scaled_part, what_must_change
from services.findings import Finding
from services.rules import run_rules
from services.settings import CheckSettings

PRINTERS = {p.slug: p for p in catalogue.printers()}
MATERIALS = {m.slug: m for m in catalogue.materials()}


def _finned(make_part):
    """A 10 x 10 x 1 mm plate with a 0.1 mm fin 2 mm tall: below the LCD resin printer's 0.15 mm minimum."""
    plate = trimesh.creation.box(extents=(10, 10, 1))
    plate.apply_translation((0, 0, 0.5))
    fin = trimesh.creation.box(extents=(0.1, 6, 2))
    fin.apply_translation((0, 0, 1.99))
    return make_part(trimesh.boolean.union([plate, fin], engine="manifold"), name="finned.stl")


def _blockers(part, printer, orientation="+z"):
    oriented = layers.orient_part(part, orientation)
    stack = layers.build_layer_stack(oriented, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)
    return [f for f in run_rules(stack=stack, part=oriented, printer=printer).findings if f.severity == "blocker"]


def test_each_suggestion_is_what_the_rules_find_when_the_change_is_made(make_part):
    """Every suggested change, made by hand and checked again, gives the blocker count the suggestion states,
    and removes a blocker the part had."""
    part = _finned(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    blockers = _blockers(part, printer)
    assert {f.rule for f in blockers} >= {"min_feature"}
    pairs = [(p, m) for p in catalogue.printers() for m in catalogue.materials()]
    found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                             findings=blockers, catalogue=pairs)
    assert 1 <= len(found) <= 3
    for alt in found:
        assert alt.blockers_removed and alt.blockers <= len(blockers) + 2
        made = scaled_part(part, alt.scale) if alt.kind == "scale" else part
        again = _blockers(made, PRINTERS[alt.printer], alt.orientation)
        lost = lost_features(layers.build_layer_stack(layers.orient_part(part, alt.orientation),
                                                      pixel_mm=PRINTERS[alt.printer].pixel_mm,
                                                      layer_height_mm=PRINTERS[alt.printer].layer_height_mm),
                             blockers) if alt.orientation == "+z" and alt.kind != "scale" else []
        assert alt.blockers == len(again) + len(lost)
        if alt.material != material.slug:
            assert "changes the optics" in alt.note


def test_nothing_is_tried_without_blockers_or_for_a_broken_mesh(make_part):
    part = _finned(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    caution = [Finding("min_gap", "caution", "a gap")]
    assert what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                            findings=caution) == []
    broken = [Finding("mesh_health", "blocker", "open edges"), Finding("min_feature", "blocker", "thin")]
    assert what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                            findings=broken) == []


def test_a_feature_a_coarse_grid_drops_is_not_a_fix(make_part):
    """A 0.1 mm fin sliced at a 0.5 mm pixel leaves nothing where the fin was: its blocker is reported as lost,
    not removed."""
    part = _finned(make_part)
    oriented = layers.orient_part(part, "+z")
    coarse = layers.build_layer_stack(oriented, pixel_mm=0.5, layer_height_mm=0.2)
    fine = layers.build_layer_stack(oriented, pixel_mm=0.05, layer_height_mm=0.05)
    fin = Finding("min_feature", "blocker", "thin fin", location_mm=(0.0, 0.0, 2.0))
    assert lost_features(coarse, [fin]) == [fin] and lost_features(fine, [fin]) == []


def test_a_fin_too_thin_is_cleared_by_the_smallest_uniform_scale(make_part):
    """The 0.1 mm fin against a 0.15 mm limit: scaled by 0.15 / 0.1 (2 % over, to the hundredth: 1.53) the part
    prints without that blocker; the volume grows by the cube of the scale (by construction)."""
    part = _finned(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    blockers = [f for f in _blockers(part, printer) if f.rule == "min_feature"]
    found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                             findings=blockers)
    [scale] = [a for a in found if a.kind == "scale"]
    expected = max(f.limit / f.measured for f in blockers) * 1.02
    assert scale.scale == pytest.approx(expected, abs=0.011) and scale.scale >= expected
    assert "min_feature" in scale.blockers_removed and "scale the whole part by" in scale.change
    assert "another frequency" in scale.note
    grown = scaled_part(part, scale.scale)
    assert grown.volume_mm3 == pytest.approx(part.volume_mm3 * scale.scale ** 3)
    assert not [f for f in _blockers(grown, printer) if f.rule == "min_feature"]


def test_a_generated_parts_scale_names_the_frequency_it_is_then_designed_for():
    """A dielectric part scaled by s does at f / s what it did at f (scale invariance of Maxwell's equations for a
    non-dispersive material; Joannopoulos et al., Photonic Crystals, ch. 2, from memory)."""
    from services.alternatives import change_sentence

    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    words = change_sentence("scale", printer, material, factor=1.25, freq_ghz=300.0)
    assert words == "scale the whole part by 1.25, the same design for 240 GHz instead of 300 GHz"


def test_a_plate_too_wide_for_the_printer_is_turned_onto_its_edge_never_left_flat(make_part):
    """A 100 x 100 x 2 mm plate does not fit the LCD printer's 130 x 80 mm plate lying flat, right way up or upside
    down; only a turn onto its edge fits. A change that still does not fit is not tried further (a part that does
    not fit cannot be printed, whatever the rules say) and is never suggested."""
    plate = trimesh.creation.box(extents=(100, 100, 2))
    part = make_part(plate, name="wide.stl")
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    fit = [Finding("build_fit", "blocker", "does not fit")]
    found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(), findings=fit)
    assert found and {a.orientation for a in found} <= {"+x", "+y"}
    assert all("build_fit" in a.blockers_removed for a in found), found
    from services import alternatives

    upside_down = alternatives._try(part, "orientation", printer, material, "-z", {"build_fit"}, fit, material,
                                    same_frame=False)
    assert upside_down is None  # dropped at the build-fit check, before any slicing


def test_a_change_still_running_when_the_budget_is_spent_is_dropped(make_part):
    """The search's budget bounds its time even when one change is slow: a change still slicing or checking when the
    budget runs out stops at its next progress report and is not shown (here the budget is already spent)."""
    import time

    from services import alternatives

    part = _finned(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    blockers = _blockers(part, printer)
    with pytest.raises(alternatives._OutOfTime):
        alternatives._try(part, "orientation", printer, material, "-z", {"min_feature"}, blockers, material,
                          same_frame=False, deadline=time.monotonic() - 1.0)


def test_a_change_whose_pace_cannot_end_within_the_budget_stops_early(monkeypatch):
    """A stage's pace is projected from its progress: 10 % done in 2 s leaves 18 s at that pace, over 1.5 times the
    8 s the budget still holds, so the change stops now rather than at the deadline; half done in 2 s goes on; and
    nothing is read from the first 5 % or the first second (a choice of this project: too little is done to read a pace)."""
    from services import alternatives

    now = [100.0]
    monkeypatch.setattr(alternatives.time, "monotonic", lambda: now[0])
    report = alternatives._paced(deadline=110.0)
    now[0] = 100.5
    report(0.01)  # too early to read a pace: goes on
    now[0] = 102.0
    report(0.5)  # 2 s more at this pace, 8 s left: goes on
    with pytest.raises(alternatives._OutOfTime):
        report(0.1)  # 18 s more at this pace, 8 s left
    assert alternatives._paced(deadline=None) is not None
    alternatives._paced(deadline=None)(0.1)  # no budget: never stops


def test_changes_the_budget_leaves_unfinished_are_named_in_trying_order(make_part):
    """With the budget spent before any change starts, nothing is found and every change is named as unfinished, in
    the order it would have been tried (the part's own printer turned over and onto its sides first)."""
    part = _finned(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    unfinished: list[str] = []
    found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                             findings=_blockers(part, printer), budget_s=-1.0, unfinished=unfinished)
    assert found == []
    assert unfinished[:3] == [f"build it along {axis} on the same printer" for axis in ("-z", "+x", "+y")]


def test_a_change_whose_rules_are_projected_past_the_budget_is_not_begun(make_part, monkeypatch):
    """Once a change's stack is sliced, its rules are projected at the part's own rules pace (seconds per unit of
    ``scan.pass_work``): over PACE_MARGIN times the budget left, the change stops before its first layer is checked
    and is named unfinished; a pace that fits lets it run. (Measured here: the 100 mm zoned lens's rules lying flat
    projected its rules on its edge at 106 s; they took about 100 s with another check beside them.)"""
    from services import alternatives
    from services.rules import scan

    part = _finned(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    blockers = _blockers(part, printer)
    stack = layers.build_layer_stack(part, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)
    now = [100.0]
    monkeypatch.setattr(alternatives.time, "monotonic", lambda: now[0])
    work = scan.pass_work(stack)
    with pytest.raises(alternatives._OutOfTime):
        alternatives._projected_in_time(stack, 20.0 / work, deadline=110.0)  # 20 s of rules, 10 s left
    alternatives._projected_in_time(stack, 12.0 / work, deadline=110.0)  # 12 s: within 1.5 x 10 s
    alternatives._projected_in_time(stack, None, deadline=110.0)  # no pace measured: never stops
    alternatives._projected_in_time(stack, 1e9, deadline=None)  # no budget: never stops

    monkeypatch.setattr(alternatives.time, "monotonic", lambda: 0.0)
    ran = []
    monkeypatch.setattr(alternatives, "run_rules", lambda **kw: ran.append(kw) or run_rules(**kw))
    unfinished: list[str] = []
    found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                             findings=blockers, unfinished=unfinished, rules_s_per_work=1e6)
    assert found == [] and ran == []
    assert unfinished[:3] == [f"build it along {axis} on the same printer" for axis in ("-z", "+x", "+y")]


def _crossed(make_part):
    """A 10 x 10 x 1 mm plate with two crossed 0.1 mm fins 2 mm tall, centred on the origin: the part is the same
    turned a quarter about its axis, so its layers on +x are those on +y, turned in the plane."""
    plate = trimesh.creation.box(extents=(10, 10, 1))
    plate.apply_translation((0, 0, 0.5))
    fins = [trimesh.creation.box(extents=extents) for extents in ((0.1, 6, 2), (6, 0.1, 2))]
    for fin in fins:
        fin.apply_translation((0, 0, 1.99))
    return make_part(trimesh.boolean.union([plate, *fins], engine="manifold"), name="crossed.stl")


def test_a_turn_whose_layers_are_another_turns_is_named_with_it_not_checked_again(make_part, monkeypatch):
    """The crossed fins on +x and on +y give the same layers (one mirrored across the diagonal): the rules run on +x
    only, and the one suggestion names both sides with the numbers the rules give when +y is checked on its own."""
    from services import alternatives

    part = _crossed(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    blockers = _blockers(part, printer)
    ran = []
    monkeypatch.setattr(alternatives, "run_rules", lambda **kw: ran.append(kw["stack"].shape) or run_rules(**kw))
    found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                             findings=blockers, at_once=1)
    sides = [a for a in found if a.kind == "orientation" and a.orientation in ("+x", "+y")]
    assert len(sides) == 1, found
    side = sides[0]
    assert side.orientation == "+x" and side.also_orientations == ("+y",)
    assert side.change == "build it along +x or +y on the same printer"
    assert "along +y it prints the same layers, mirrored across the diagonal (checked once)" in side.note
    on_y = _blockers(part, printer, "+y")
    assert side.blockers == len(on_y) and set(side.blockers_removed) == {f.rule for f in blockers} - {f.rule for f in on_y}
    x_shape = layers.build_layer_stack(layers.orient_part(part, "+x"), pixel_mm=printer.pixel_mm,
                                       layer_height_mm=printer.layer_height_mm).shape
    assert ran.count(x_shape) == 1 and ran.count(x_shape[::-1]) == 0  # +x checked, +y (its frame transposed) not


def test_a_turn_whose_layers_are_the_parts_own_is_not_checked_again(make_part, monkeypatch):
    """A plate with a fin through it (off centre in y), the same above and below: turned over, its layers are its own
    mirrored across x, so with the part's own stack given the rules run once less and the suggestions are the same."""
    from services import alternatives

    plate = trimesh.creation.box(extents=(10, 10, 1))
    fin = trimesh.creation.box(extents=(0.1, 6, 4))
    fin.apply_translation((0, 1, 0))
    part = make_part(trimesh.boolean.union([plate, fin], engine="manifold"), name="through.stl")
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    oriented = layers.orient_part(part, "+z")
    own = layers.build_layer_stack(oriented, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)
    upside_down = layers.build_layer_stack(layers.orient_part(part, "-z"), pixel_mm=printer.pixel_mm,
                                           layer_height_mm=printer.layer_height_mm)
    assert layers.same_layers_turned(own, upside_down) == "mirrored across x"
    blockers = _blockers(part, printer)
    counts = []
    for stack in (None, own):
        ran = []
        monkeypatch.setattr(alternatives, "run_rules", lambda **kw: ran.append(1) or run_rules(**kw))
        found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                                 findings=blockers, at_once=1, stack=stack)
        counts.append((len(ran), found))
    (without, found_without), (with_own, found_with) = counts
    assert with_own == without - 1 and found_with == found_without


def test_a_twin_of_a_turn_left_unfinished_is_named_unfinished(make_part):
    """The budget spent before anything starts: the crossed fins' +y (a twin of +x, had it been sliced) is named
    unfinished like every other change, never shown as a result."""
    part = _crossed(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    unfinished: list[str] = []
    found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                             findings=_blockers(part, printer), budget_s=-1.0, unfinished=unfinished)
    assert found == [] and "build it along +y on the same printer" in unfinished


def test_a_turn_sliced_before_its_earlier_twin_still_finds_it(make_part, monkeypatch):
    """Side by side, +y can have its layers before +x (a wide part's turns take seconds to slice): it waits for +x's
    layers instead of running its own rules, so the rules still run on +x only (here +x's slicing is held back)."""
    import time

    from services import alternatives

    part = _crossed(make_part)
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    slice_stack = layers.build_layer_stack

    def slow_on_x(oriented, **kw):
        stack = slice_stack(oriented, **kw)
        if stack.shape[0] > stack.shape[1]:  # +x: the plate's 10 mm along y, its 3 mm height along x
            time.sleep(0.5)
        return stack

    ran = []
    monkeypatch.setattr(alternatives.layers, "build_layer_stack", slow_on_x)
    monkeypatch.setattr(alternatives, "run_rules", lambda **kw: ran.append(kw["stack"].shape) or run_rules(**kw))
    found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                             findings=_blockers(part, printer), at_once=3)
    sides = [a for a in found if a.kind == "orientation" and a.orientation in ("+x", "+y")]
    assert len(sides) == 1 and sides[0].also_orientations == ("+y",), found
    assert sum(shape[0] < shape[1] for shape in ran) == 0, ran  # +y's frame (x long) never reached the rules


def test_a_turn_waits_only_for_earlier_turns_of_its_height_and_widths():
    """Layers can be the same, turned in the plane, only for turns of the same height and the same two widths:
    a turn on its side does not wait for the part turned over to be sliced, but one of the same extents does,
    until that one ends."""
    import threading

    from services import alternatives

    stack = layers.LayerStack.from_masks([[[True]]], pixel_mm=0.05, layer_height_mm=0.05)
    other_shape = alternatives._SameLayers(None, {0: (10.0, 10.0, 3.0), 1: (3.0, 10.0, 10.0)})
    assert other_shape.known(1, stack) is None  # returns at once though turn 0 never ends

    same_shape = alternatives._SameLayers(None, {0: (3.0, 10.0, 10.0), 1: (10.0, 3.0, 10.0)})
    answered = threading.Event()
    waiting = threading.Thread(target=lambda: (same_shape.known(1, stack), answered.set()))
    waiting.start()
    assert not answered.wait(0.3)  # still waiting for turn 0
    same_shape.end(0)
    assert answered.wait(5.0)
    waiting.join()


def test_turned_over_the_parts_layers_are_read_from_its_own_not_sliced_again(make_part, monkeypatch):
    """A plate 3 mm tall with a thin fin on top (a whole number of the printer's layers): turned over, its layers are
    its own reversed and mirrored, so with its own stack given the slicer runs once less and the suggestions are
    the same as when every change is sliced."""
    from services import alternatives

    plate = trimesh.creation.box(extents=(10, 10, 1))
    plate.apply_translation((0, 0, 0.5))
    fin = trimesh.creation.box(extents=(0.1, 6, 2))
    fin.apply_translation((0, 1, 2.0))
    part = make_part(trimesh.boolean.union([plate, fin], engine="manifold"), name="fin-on-top.stl")
    printer, material = PRINTERS["bay1-lcd-resin"], MATERIALS["standard-resin"]
    own = layers.build_layer_stack(layers.orient_part(part, "+z"), pixel_mm=printer.pixel_mm,
                                   layer_height_mm=printer.layer_height_mm)
    blockers = _blockers(part, printer)
    slice_stack = layers.build_layer_stack
    runs = []
    for stack in (None, own):
        sliced = []
        monkeypatch.setattr(alternatives.layers, "build_layer_stack",
                            lambda oriented, **kw: sliced.append(1) or slice_stack(oriented, **kw))
        found = what_must_change(part=part, printer=printer, material=material, settings=CheckSettings(),
                                 findings=blockers, at_once=1, stack=stack)
        runs.append((len(sliced), found))
    (sliced_all, found_all), (sliced_fewer, found_fewer) = runs
    assert sliced_fewer == sliced_all - 1 and found_fewer == found_all
    monkeypatch.setattr(alternatives.layers, "build_layer_stack", slice_stack)
    before = {f.rule for f in blockers}
    read, cut = (alternatives._try(part, "orientation", printer, material, "-z", before, blockers, material,
                                   same_frame=False, turned_from=turned_from) for turned_from in (own, None))
    assert read is not None and read == cut  # the same blockers, cautions, removals, time and cost
