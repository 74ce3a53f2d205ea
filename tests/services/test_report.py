"""The report boundary: no NaN or infinity ever reaches a report; what could not be computed is said."""

from __future__ import annotations

import json
import re

import pytest

from services import catalogue
from services.cli import main
from services.errors import UnusableInput
from services.intake import read_part
from services.report import STAGES, build_report, finite_sections
from services.settings import CheckSettings, OpticsSettings
from tests.data.make_files import fan_out_3mf


def _scattered():
    """Return 200 cubes of 0.06 mm at a 0.3 mm pitch: printable specks, but no analysis cell half covered."""
    return fan_out_3mf(200, side_mm=0.06, pitch_mm=0.3)


def test_finite_sections_blanks_and_names_every_non_finite_number():
    """NaN and both infinities become None, nested anywhere; finite numbers and other values are kept."""
    sections = {"optics": {"loss_db": [1.5, float("nan")], "focus": {"strehl": float("inf")}},
                "estimate": None, "layers": {"count": 3, "label": "x", "z": -float("inf")}}
    clean, blanked = finite_sections(sections)
    assert clean == {"optics": {"loss_db": [1.5, None], "focus": {"strehl": None}}, "estimate": None,
                     "layers": {"count": 3, "label": "x", "z": None}}
    assert blanked == ["optics.loss_db[1]", "optics.focus.strehl", "layers.z"]
    json.dumps(clean, allow_nan=False)  # JSON (RFC 8259) has no NaN or Infinity


@pytest.mark.parametrize("focal_length_mm", [None, 50.0], ids=["losses", "focus"])
def test_a_part_without_a_clear_aperture_says_the_optics_were_not_computed(focal_length_mm):
    """Scattered specks give zero illumination weight (0 / 0): a note with the reason, and no NaN stored."""
    part = read_part(_scattered(), name="specks.3mf")
    report = build_report(part=part, printer=catalogue.printer("bay1-lcd-resin"),
                          material=catalogue.material("standard-resin"),
                          settings=CheckSettings(optics=OpticsSettings(freqs_ghz=(140.0,),
                                                                       focal_length_mm=focal_length_mm)))
    stored = json.dumps(report.to_dict(), allow_nan=False)
    assert "NaN" not in stored and "Infinity" not in stored
    notes = [f.message for f in report.findings if f.rule == "not_computed"]
    # Cells of whole 0.05 mm pixels at most lambda / 4 at the top of 140 GHz's quarter-octave band (152 GHz): 0.45 mm.
    assert len(notes) == 1 and notes[0].startswith("specks.3mf: the optics were not computed: no 0.45 mm analysis cell")
    assert "clear aperture" in report.optics["not_computed"]
    assert report.estimate is not None  # the specks still print, so the quote stands


def test_the_cli_never_prints_nan(tmp_path, capsys):
    """The text report for the scattered specks has no 'nan' in any line."""
    path = tmp_path / "specks.3mf"
    path.write_bytes(_scattered())
    assert main(["check", str(path), "--printer", "bay1-lcd-resin", "--material", "standard-resin",
                 "--freq-ghz", "140"]) == 0
    out = capsys.readouterr().out.lower()
    assert not re.search(r"\b(nan|inf)\b", out) and "optics were not computed" in out


def test_an_empty_stack_without_a_blocker_is_refused_with_the_file_name():
    """A closed cube smaller than half a pixel slices to nothing: the refusal names the file and the grid."""
    from tests.data.make_files import cube, stl_binary

    part = read_part(stl_binary(*cube(0.01)), name="dust.stl")
    with pytest.raises(UnusableInput) as caught:
        build_report(part=part, printer=catalogue.printer("bay1-lcd-resin"),
                     material=catalogue.material("standard-resin"))
    assert caught.value.code == "empty_part"
    assert caught.value.message.startswith("dust.stl: the part has no solid at this printer's 0.05 mm pixel")


@pytest.fixture(scope="module")
def lens_with_pillar():
    """Return a 10 mm zoned lens with a slender pillar and a thin wall beside it: rule, optics and intake findings."""
    import trimesh

    from services.components import build_component
    from services.components.export import stl_bytes

    printer, material = catalogue.printer("bay1-lcd-resin"), catalogue.material("standard-resin")
    lens = build_component("zoned", {"diameter_mm": 10.0}, material=material, printer=printer).part
    pillar = trimesh.creation.box((0.08, 0.08, 3.0))
    pillar.apply_translation((7.0, 0.0, 1.5))
    wall = trimesh.creation.box((0.06, 3.0, 1.0))
    wall.apply_translation((-7.0, 0.0, 0.5))
    mesh = trimesh.util.concatenate([trimesh.Trimesh(lens.vertices_mm, lens.faces, process=False), pillar, wall])
    return read_part(stl_bytes(mesh.vertices, mesh.faces), name="lens-with-pillar.stl", units="mm"), printer, material


def _check(part_printer_material, **kwargs):
    part, printer, material = part_printer_material
    return build_report(part=part, printer=printer, material=material, **kwargs)


def test_rules_beside_optics_give_the_same_report_as_in_order(lens_with_pillar):
    """Same findings, numbers and pictures whether rules and optics run side by side or one after the other."""
    seen = {True: [], False: []}
    reports = {concurrent: _check(lens_with_pillar, concurrent_stages=concurrent,
                                  progress=lambda name, fraction, c=concurrent: seen[c].append((name, fraction)))
               for concurrent in (False, True)}
    stored = {c: {k: v for k, v in r.to_dict().items() if k != "timings_s"} for c, r in reports.items()}
    assert {f["rule"] for f in stored[True]["findings"]} >= {"min_feature", "aspect_ratio", "period"}
    assert stored[True] == stored[False]
    assert reports[True].figures == reports[False].figures
    assert reports[True].timings_s.keys() == reports[False].timings_s.keys()
    order = [name for name, _ in STAGES]
    for concurrent, calls in seen.items():
        fractions = [f for _, f in calls]
        assert fractions == sorted(fractions) and fractions[-1] == pytest.approx(1.0), concurrent
        indices = [order.index(name) for name, _ in calls]
        assert indices == sorted(indices), concurrent


@pytest.mark.parametrize("error", [UnusableInput("bad_rule_input", "lens-with-pillar.stl: cannot be checked."),
                                   RuntimeError("a rule broke")], ids=["unusable", "internal"])
def test_a_rules_error_while_optics_runs_ends_the_check_as_in_order(lens_with_pillar, monkeypatch, error):
    """The rules' error is raised in both modes; side by side, optics is stopped and no stage thread is left."""
    import threading

    from services import report as report_module

    optics_started, optics_ends, side_by_side = threading.Event(), [], []
    real_optics = report_module._optics

    def optics(*args, **kwargs):
        optics_started.set()
        try:
            result = real_optics(*args, **kwargs)
        except BaseException as exc:
            optics_ends.append(type(exc).__name__)
            raise
        optics_ends.append("finished")
        return result

    def failing_rules(**kwargs):
        if side_by_side:  # fail while optics runs (in order, optics never starts)
            assert optics_started.wait(10)
        raise error

    monkeypatch.setattr(report_module, "_optics", optics)
    monkeypatch.setattr(report_module, "run_rules", failing_rules)
    raised = {}
    for concurrent in (False, True):
        side_by_side[:] = [True] if concurrent else []
        with pytest.raises(type(error)) as caught:
            _check(lens_with_pillar, concurrent_stages=concurrent)
        raised[concurrent] = caught.value
    assert raised[True] is raised[False] is error
    assert optics_ends == ["StageCancelled"]  # in order it never ran; side by side it stopped at its next report
    assert not [t for t in threading.enumerate() if t.name.startswith("phasewright-stage")]


def test_an_optics_error_after_clean_rules_is_raised_in_both_modes(lens_with_pillar, monkeypatch):
    """An optics failure ends the check with that error, side by side as in order."""
    from services import report as report_module

    def broken_optics(*args, **kwargs):
        raise ZeroDivisionError("optics broke")

    monkeypatch.setattr(report_module, "_optics", broken_optics)
    for concurrent in (False, True):
        with pytest.raises(ZeroDivisionError, match="optics broke"):
            _check(lens_with_pillar, concurrent_stages=concurrent)


def test_rules_estimate_and_optics_leave_the_stack_and_part_unchanged(lens_with_pillar):
    """What the two branches share (the stack's and the part's arrays) is only read, so they may run at once."""
    import hashlib

    from services import layers
    from services import report as report_module
    from services.rules import run_rules
    from services.settings import CheckSettings

    part, printer, material = lens_with_pillar
    stack = layers.build_layer_stack(part, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)

    def digest():
        arrays = [part.vertices_mm, part.faces, stack.area_mm2, stack.perimeter_mm, stack.thickness_mm,
                  stack._boxes, stack._index]
        return [hashlib.sha256(a.tobytes()).hexdigest() for a in arrays] + [stack._packed, part.findings]

    before = digest()
    rules = run_rules(stack=stack, part=part, printer=printer)
    report_module._estimate(stack, part, printer, material, CheckSettings(), rules)
    report_module._optics(part, stack, printer, material, CheckSettings())
    assert digest() == before


def test_what_must_change_is_asked_only_of_blockers_its_changes_check_again(lens_with_pillar, monkeypatch):
    """A tried change re-runs the mesh, build-fit and rule checks, not the optics: a phase-error blocker (made up here
    through the optics' own finding function) never goes to the search, so no change can be said to remove it."""
    from services import report as report_module
    from services.findings import Finding
    from services.optics import checks

    blocker = Finding("phase_error", "blocker", "made up for this test", measured=0.1, limit=0.5, unit="strehl")
    monkeypatch.setattr(checks, "phase_error_finding", lambda *args, **kwargs: blocker)
    asked = []
    monkeypatch.setattr(report_module, "what_must_change", lambda **kwargs: asked.append(kwargs["findings"]) or [])
    report = _check(lens_with_pillar)
    assert blocker in report.findings
    assert len(asked) == 1 and blocker not in asked[0]
    assert {f.rule for f in asked[0]} >= {"min_feature", "aspect_ratio"}
