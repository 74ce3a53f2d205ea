"""The PDF report, read back with pypdf (an independent PDF reader) rather than trusted blindly."""

import io
import re
from datetime import datetime, timezone

import pytest
import trimesh
from pypdf import PdfReader

from services import catalogue
from services.render.pdf import report_pdf
from services.report import build_report
from services.settings import CheckSettings, OpticsSettings

CHECKED_AT = datetime(2026, 3, 4, 5, 6, tzinfo=timezone.utc)


@pytest.fixture(scope="module")
def finned_report(make_part):
    """A real report of a plate with a 0.1 mm fin on the LCD resin printer, optics at 140 GHz."""
    plate = trimesh.creation.box(extents=(10, 10, 1))
    plate.apply_translation((0, 0, 0.5))
    fin = trimesh.creation.box(extents=(0.1, 6, 2))
    fin.apply_translation((0, 0, 1.99))
    part = make_part(trimesh.boolean.union([plate, fin], engine="manifold"), name="finned.stl")
    printer = {p.slug: p for p in catalogue.printers()}["bay1-lcd-resin"]
    material = {m.slug: m for m in catalogue.materials()}["standard-resin"]
    settings = CheckSettings(quantities=(1, 5), optics=OpticsSettings(freqs_ghz=(140.0,)))
    return build_report(part=part, printer=printer, material=material, settings=settings)


def _text(pdf: bytes) -> tuple[str, PdfReader]:
    reader = PdfReader(io.BytesIO(pdf))
    return "\n".join(page.extract_text() for page in reader.pages), reader


def test_it_carries_what_a_purchase_request_needs(finned_report):
    """Verdict, quote total, the finding and what to change, versions, optics and cautions are all in it."""
    report = finned_report.to_dict()
    pdf = report_pdf(report, finned_report.figures, checked_at=CHECKED_AT, link="http://lab.example/checks/1/")
    assert pdf[:5] == b"%PDF-"
    text, reader = _text(pdf)
    assert "finned.stl" in text and "Not printable" in text and "Checked 2026-03-04 05:06 UTC" in text
    assert f"{report['estimate']['cost']['total']:.2f}" in text
    assert "Minimum feature" in text and "widen to at least" in text.replace("\n", " ")
    assert "Bay 1 - LCD-masked resin (bay1-lcd-resin), version 1" in text
    assert "Standard methacrylate resin (standard-resin), version 1" in text
    assert "Optics at the design frequencies" in text and "εr" in text  # Greek needs the embedded font
    assert "Safety reminders" in text and "nitrile gloves" in text
    assert reader.metadata.title.startswith("finned.stl on Bay 1")
    waste = f"({report['estimate']['waste_ml']:.2f} ml of it waste, the material's 10 %)"  # the catalogue's 0.1
    assert waste in text.replace("\n", " ")


def test_it_embeds_the_pictures(finned_report):
    """Each finding's picture, both views and the optics plots are placed as images."""
    report = finned_report.to_dict()
    pdf = report_pdf(report, finned_report.figures, checked_at=CHECKED_AT)
    _, reader = _text(pdf)
    images = sum(len(page.images) for page in reader.pages)
    pictures = [f["picture"] for f in report["findings"] if f["picture"]]
    placed = [n for n in ("perspective.png", "thickness_map.png", "optics_loss.png", "optics_focal_plane.png",
                          "optics_phase_map.png") if n in finned_report.figures]
    # One frequency: no curve against frequency, the phase map instead.
    assert pictures and {"perspective.png", "thickness_map.png", "optics_phase_map.png"} <= set(placed)
    assert "optics_loss.png" not in finned_report.figures
    assert images == len(pictures) + len(placed)  # one per finding's picture, both views, the optics plots made


def test_it_draws_a_report_without_estimate_or_optics():
    """An older or partial report still gives a PDF, saying what it lacks."""
    report = {"design": {"name": "bare.stl"}, "printer": {"name": "P", "version": 2}, "material": {"name": "M"},
              "verdict": "printable", "findings": [], "estimate": None, "optics": None, "cautions": []}
    text, reader = _text(report_pdf(report, {}, checked_at=CHECKED_AT))
    assert "Printable" in text and "No estimate" in text and "No findings" in text and len(reader.pages) == 1


def test_it_says_beside_the_verdict_whether_the_requirements_are_met(make_part):
    """A 10 x 10 x 3 mm block against a 1.5 mm thickness target: the PDF says it misses them, with the table."""
    from services.requirements import Requirements

    part = make_part(trimesh.creation.box(extents=(10, 10, 3)), name="block.stl")
    settings = CheckSettings(quantities=(1,), optics=OpticsSettings(freqs_ghz=(140.0,)),
                             requirements=Requirements(max_thickness_mm=1.5))
    report = build_report(part=part, printer=catalogue.printer("bay1-lcd-resin"),
                          material=catalogue.material("standard-resin"), settings=settings)
    text, _ = _text(report_pdf(report.to_dict(), report.figures, checked_at=CHECKED_AT))
    assert "Requirements: Misses its requirements" in text
    assert "missed as designed" in text and "at most 1.5 mm" in text
    # The target's finding is badged by what became of it; "blocker" stays for printability findings.
    assert re.search(r"\d+\s+TARGET MISSED", text) and "BLOCKER" not in text
    plain, _ = _text(report_pdf({**report.to_dict(), "meets_requirements": "not_stated", "requirements": None},
                                report.figures, checked_at=CHECKED_AT))
    assert "Requirements: No requirements stated" in plain


def test_a_findings_worst_instances_read_in_three_figures_without_exponents():
    """Measures of 1,000 or more (a hollow's section in mm2) read as a person writes them in the instance list,
    as in the finding's own line: '1,470 mm2', never '1.47e+03'."""
    finding = {"rule": "trapped_volume", "severity": "caution", "message": "Hollows.", "measured": 1466.9,
               "unit": "mm2", "count": 2, "picture": None,
               "instances": [{"location_mm": [1.0, 2.0, 3.0], "layers": [4, 9], "measured": 1466.9},
                             {"location_mm": [5.0, 6.0, 7.0], "layers": [2, 3], "measured": 12.34}]}
    report = {"design": {"name": "hollow.stl"}, "printer": {"name": "P", "version": 2}, "material": {"name": "M"},
              "verdict": "printable_with_cautions", "findings": [finding], "estimate": None, "optics": None,
              "cautions": []}
    text, _ = _text(report_pdf(report, {}, checked_at=CHECKED_AT))
    text = text.replace("\n", " ")
    assert "layers 4-9: 1,470 mm2" in text and "layers 2-3: 12.3 mm2" in text and "e+03" not in text


def test_a_material_without_waste_says_nothing_of_it(finned_report):
    """'0.00 ml of it waste, the material's 0 %' would be noise: the clause is left out."""
    report = finned_report.to_dict()
    report["estimate"] = {**report["estimate"], "waste_ml": 0.0, "waste_percent": 0.0}
    text, _ = _text(report_pdf(report, finned_report.figures, checked_at=CHECKED_AT))
    assert "of it waste" not in text and "Print time for one part" in text


def test_a_grooved_window_carries_its_whole_solution_beside_the_cells():
    """A report whose optics solved a window's grooves whole prints them with the cells' difference, per frequency."""
    optics = {"frequencies_ghz": [130.0, 150.0], "eps_r": [2.77, 2.77], "tan_delta": [0.03, 0.03],
              "transmission_loss_db": [1.2, 1.3], "as_designed": {"transmission_loss_db": [1.2, 1.3]},
              "analysis": {"grooves_whole_window": {
                  "power_reflection": [0.00026, 0.0039], "power_transmission": [0.853, 0.814],
                  "cell_model_minus_whole_points": {"power_reflection": [0.13, 0.05], "power_transmission": [0.0, 2.0]}}}}
    report = {"design": {"name": "window.stl"}, "printer": {"name": "P", "version": 2}, "material": {"name": "M"},
              "verdict": "printable", "findings": [], "estimate": None, "optics": optics, "cautions": []}
    text, _ = _text(report_pdf(report, {}, checked_at=CHECKED_AT))
    assert "Matching grooves solved whole" in text
    assert "0.39 %" in text and "81.4 %" in text and "0.05 / 2.00" in text
