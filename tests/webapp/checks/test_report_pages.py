"""Reading a finished check: the report page, its PDF and JSON, comparisons and revisions."""

import io
import re
from dataclasses import replace
from unittest import mock

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse
from pypdf import PdfReader

from tests.webapp.parts import finned_plate_stl
from webapp.checks import services
from webapp.checks.models import Check, Design


def test_the_report_reads_verdict_first_then_findings_with_pictures(alice_client, finned_report, make_done_check, alice,
                                                                     django_assert_max_num_queries):
    """Verdict before findings; each finding with its picture, place and what to change; quote, optics, views."""
    check = make_done_check(alice, finned_report)
    with django_assert_max_num_queries(12):
        page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    assert page.index("Not printable") < page.index('id="findings"') < page.index('id="quote"') < page.index('id="optics"')
    assert page.count('<article class="finding') == len(finned_report.findings) >= 1
    first = finned_report.findings[0]
    assert "Minimum feature" in page and first.message in page
    assert f"layers {first.layers[0]}-{first.layers[1]}" in page and f"{first.measured:,.3f} mm" in page
    for finding in finned_report.findings:
        assert reverse("check_file", args=[check.public_id, finding.picture]) in page
    for name in ("perspective.png", "thickness_map.png", "optics_phase_map.png"):
        assert reverse("check_file", args=[check.public_id, name]) in page
    # At one frequency no curve against frequency is drawn (the table holds its numbers).
    assert "optics_loss.png" not in page and "optics_fwhm.png" not in page
    assert f"{finned_report.estimate['cost']['total']:,.2f}" in page and "Set-up labour" in page
    assert f"waste {finned_report.estimate['waste_ml']:.2f} ml at the material's 10 %" in page  # part + supports + waste
    assert reverse("check_pdf", args=[check.public_id]) in page and "nitrile gloves" in page


def test_every_picture_of_the_page_is_served(alice_client, finned_report, make_done_check, alice):
    """Each img the report page shows answers with a PNG (no broken pictures)."""
    check = make_done_check(alice, finned_report)
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    sources = set(re.findall(r'<img[^>]*src="([^"]+)"', page))
    assert len(sources) >= 5
    for src in sources:
        response = alice_client.get(src)
        assert response.status_code == 200 and b"".join(response.streaming_content)[:4] == b"\x89PNG"


def test_it_downloads_the_pdf_once_drawn(alice_client, finned_report, make_done_check, alice):
    """The PDF carries the verdict and finding; a second download reuses the stored file."""
    check = make_done_check(alice, finned_report)
    url = reverse("check_pdf", args=[check.public_id])
    response = alice_client.get(url)
    assert response.status_code == 200 and response["Content-Type"] == "application/pdf"
    assert 'filename="finned-bay1-lcd-resin-report.pdf"' in response["Content-Disposition"]
    text = "\n".join(p.extract_text() for p in PdfReader(io.BytesIO(response.content)).pages)
    assert "Not printable" in text and "Minimum feature" in text and f"/checks/{check.public_id}/" in text
    with mock.patch("services.render.pdf.report_pdf") as draw:
        again = alice_client.get(url)
    assert again.content == response.content and not draw.called


def test_the_pdf_links_to_the_address_the_reader_used(alice_client, finned_report, make_done_check, alice):
    """A site on another port or host gets PDFs that link back to it, not to the configured default."""
    check = make_done_check(alice, finned_report)
    response = alice_client.get(reverse("check_pdf", args=[check.public_id]), HTTP_HOST="localhost:8123")
    text = "\n".join(p.extract_text() for p in PdfReader(io.BytesIO(response.content)).pages)
    assert f"http://localhost:8123/checks/{check.public_id}/" in text.replace("\n", "")


def test_the_json_report_downloads(alice_client, finned_report, make_done_check, alice):
    check = make_done_check(alice, finned_report)
    response = alice_client.get(reverse("check_report_json", args=[check.public_id]))
    assert response.json()["verdict"] == "not_printable" and "attachment" in response["Content-Disposition"]


def test_a_failed_check_says_what_happened_and_what_to_do(alice_client, alice, seeded):
    """The failure's sentence and a next step, with no progress bar left running."""
    from services.settings import CheckSettings
    from webapp.catalogue.models import Material, Printer

    design = services.design_create(owner=alice, name="noise.stl", data=b"\x00" * 100)
    with mock.patch("webapp.checks.queue.send_run_check"):
        check = services.check_create(owner=alice, design=design, printer=Printer.objects.get(slug="bay1-lcd-resin"),
                                      material=Material.objects.get(slug="standard-resin"), check_settings=CheckSettings())
    services.check_fail(check_id=check.pk, code="not_a_mesh", message="noise.stl: this is not a mesh file.")
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    assert "noise.stl: this is not a mesh file." in page and "What to do:" in page and "progressbar" not in page
    # The design's page and the designs list say why, not only "failed" (read as a designer would, through make run).
    design_page = alice_client.get(reverse("design", args=[design.public_id])).content.decode()
    assert "noise.stl: this is not a mesh file." in design_page
    listed = alice_client.get(reverse("designs")).content.decode()
    assert 'title="noise.stl: this is not a mesh file."' in listed


def test_a_revision_shows_what_changed(alice_client, alice, finned_report, fixed_report, make_done_check):
    """Revision 2 joins the family; its report links to the comparison, which lists the fixed findings and deltas."""
    first = make_done_check(alice, finned_report)
    with mock.patch("webapp.checks.queue.send_run_check"):
        response = alice_client.post(reverse("design_revise", args=[first.design.public_id]), {
            "file": SimpleUploadedFile("finned_v2.stl", finned_plate_stl(0.5)), "note": "fin widened to 0.5 mm",
            "units": "mm", "printer": "bay1-lcd-resin", "material": "standard-resin", "orientation": "+z",
            "quantities": "1, 5"})
    revision = Design.objects.get(name="finned_v2.stl")
    assert response.status_code == 302 and revision.family == first.design.family and revision.revision == 2
    second = Check.objects.get(design=revision)
    services.report_store(check=second, report=fixed_report)
    page = alice_client.get(reverse("check", args=[second.public_id])).content.decode()
    compare_url = f"{reverse('compare')}?c={first.public_id}&amp;c={second.public_id}"
    assert "Compare with revision 1" in page and compare_url in page
    diff = alice_client.get(compare_url.replace("&amp;", "&")).content.decode()
    from services.render.tables import rule_label

    count = len(finned_report.findings)
    fixed = diff[diff.index(f"Fixed ({count})"):diff.index("New (0)")]
    assert all(rule_label(f.rule) in fixed for f in finned_report.findings)
    assert "+1.00 EUR" in diff and "Not printable → Printable" in diff


def test_the_designs_list_shows_a_family_once(alice_client, alice, finned_report, make_done_check):
    """Two revisions of one design are one row, at its latest revision."""
    first = make_done_check(alice, finned_report)
    make_done_check(alice, finned_report, revision_of=first.design, name="finned_v2.stl")
    page = alice_client.get(reverse("designs")).content.decode()
    assert "finned_v2.stl" in page and ">finned.stl<" not in page and "2 revisions" in page


def test_the_same_design_on_more_printers_and_materials(alice_client, alice, finned_report, make_done_check):
    """Ticked printers x materials queue one check per pair that can print; the rest are named."""
    check = make_done_check(alice, finned_report)
    with mock.patch("webapp.checks.queue.send_run_check"):
        response = alice_client.post(reverse("design_recheck", args=[check.design.public_id]), {
            "printers": ["bay1-lcd-resin", "bay2-filament"], "materials": ["standard-resin", "pla"]}, follow=True)
    made = set(Check.objects.filter(design=check.design, status="queued").values_list("printer__slug", "material__slug"))
    assert made == {("bay1-lcd-resin", "standard-resin"), ("bay2-filament", "pla")}
    page = response.content.decode()
    assert "2 checks queued" in page and "cannot print the material" in page


def test_checks_compare_side_by_side(alice_client, alice, finned_report, fixed_report, make_done_check):
    """Two finished checks of one design, on two materials, stand in two columns."""
    first = make_done_check(alice, finned_report)
    other = make_done_check(alice, fixed_report, material="tough-resin", design=first.design)
    page = alice_client.get(reverse("compare"), {"c": [first.public_id, other.public_id]}).content.decode()
    assert page.count('<th scope="col"><a href=') == 2 and "Not printable" in page and "Printable" in page


def test_ticking_more_than_six_says_which_are_compared(alice_client, alice, finned_report, make_done_check):
    """Seven ticked: the page says six of seven are compared, and its heading counts the six it shows."""
    first = make_done_check(alice, finned_report)
    ids = [first.public_id] + [make_done_check(alice, finned_report, design=first.design).public_id for _ in range(6)]
    page = alice_client.get(reverse("compare"), {"c": ids}).content.decode()
    assert "You ticked 7 checks; the first 6 are compared side by side." in page
    assert "<h1>Compare 6 checks</h1>" in page and page.count('<th scope="col"><a href=') == 6


def test_the_status_reads_the_same_in_every_list(alice_client, alice, seeded):
    """A queued check is "waiting for a worker" on its page, in its design's list and in the status JSON."""
    from unittest import mock

    from services.settings import CheckSettings
    from webapp.catalogue.models import Material, Printer
    from webapp.checks import services
    from tests.webapp.parts import finned_plate_stl

    design = services.design_create(owner=alice, name="finned.stl", data=finned_plate_stl(), units="mm")
    with mock.patch("webapp.checks.queue.send_run_check"):
        check = services.check_create(owner=alice, design=design, printer=Printer.objects.get(slug="bay1-lcd-resin"),
                                      material=Material.objects.get(slug="standard-resin"), check_settings=CheckSettings())
    assert "Waiting for a worker" in alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    assert "waiting for a worker" in alice_client.get(reverse("design", args=[design.public_id])).content.decode()
    assert "waiting for a worker" in alice_client.get(reverse("designs")).content.decode()
    status = alice_client.get(reverse("check_status", args=[check.public_id])).json()
    assert status["status"] == "queued" and status["label"] == "waiting for a worker"


def test_a_catalogue_change_since_the_check_is_noted(alice_client, alice, finned_report, make_done_check):
    """When the printer profile moved on, the report says which version it used."""
    from webapp.catalogue.models import Printer

    check = make_done_check(alice, finned_report)
    Printer.objects.filter(slug="bay1-lcd-resin").update(version=2)
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    assert "is now at version 2; this report used version 1" in page


def test_only_a_lab_manager_sees_the_catalogue_in_the_menu(alice_client, bob_client, seeded):
    """Bob's menu leads to printers, materials and prices; alice's does not."""
    assert "Printers, materials &amp; prices" in bob_client.get(reverse("designs")).content.decode()
    assert "Printers, materials &amp; prices" not in alice_client.get(reverse("designs")).content.decode()


def test_charlie_learns_nothing_of_alices_work(charlie_client, alice, finned_report, make_done_check):
    """A stranger gets 404 for alice's PDF, comparisons, revisions, re-checks and parametric revisions."""
    check = make_done_check(alice, finned_report)
    other = make_done_check(alice, finned_report, design=check.design)
    design_id = check.design.public_id
    assert charlie_client.get(reverse("check_pdf", args=[check.public_id])).status_code == 404
    assert charlie_client.get(reverse("compare"), {"c": [check.public_id, other.public_id]}).status_code == 404
    assert charlie_client.post(reverse("design_revise", args=[design_id]), {}).status_code == 404
    assert charlie_client.post(reverse("design_recheck", args=[design_id]), {}).status_code == 404
    assert charlie_client.get(reverse("generate", args=["zoned"]), {"revision_of": design_id}).status_code == 404
    assert Check.objects.filter(owner__username="charlie").count() == 0


def test_the_report_page_offers_the_3d_view_and_its_data(alice_client, finned_report, make_done_check, alice):
    """The page holds the 3D view's section and the import map of the vendored viewer; the data file is the
    check's own (schema, the report's located findings as markers)."""
    import json

    check = make_done_check(alice, finned_report)
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    assert 'id="part-view"' in page and "vendor/three/three.module.min.js" in page and 'href="#part-view"' in page
    response = alice_client.get(reverse("check_file", args=[check.public_id, "part-view.json"]))
    view = json.loads(b"".join(response.streaming_content))
    located = [i for i, f in enumerate(finned_report.to_dict()["findings"], start=1) if f["location_mm"]]
    assert view["schema"] == "phasewright.part-view/1" and sorted(n for m in view["markers"] for n in m["numbers"]) == located
    assert located and view["mesh"]["source_triangles"] == finned_report.design["triangles"]


@pytest.mark.parametrize("kind", ["specks", "one_triangle"])
def test_a_report_with_parts_not_computed_shows_and_prints_without_nan(alice_client, alice, make_done_check, kind):
    """Optics not computed (no clear aperture) or no estimate (an open surface): the page and PDF say so, no NaN."""
    from services import catalogue
    from services.intake import read_part
    from services.report import build_report
    from services.settings import CheckSettings, OpticsSettings
    from tests.data.make_files import cube, fan_out_3mf, stl_binary

    if kind == "specks":
        data, name = fan_out_3mf(200, side_mm=0.06, pitch_mm=0.3), "specks.3mf"
    else:
        v, f = cube(10.0)
        data, name = stl_binary(v, f[:1]), "one.stl"
    report = build_report(part=read_part(data, name=name), printer=catalogue.printer("bay1-lcd-resin"),
                          material=catalogue.material("standard-resin"),
                          settings=CheckSettings(optics=OpticsSettings(freqs_ghz=(140.0,))))
    check = make_done_check(alice, report, name=name)
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    assert "Not computed" in page and 'id="optics"' not in page
    assert not re.search(r"\b(nan|NaN|inf)\b", page)
    pdf = alice_client.get(reverse("check_pdf", args=[check.public_id]))
    assert pdf.status_code == 200
    text = "\n".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf.content)).pages)
    assert not re.search(r"\b(nan|NaN|inf)\b", text)


def test_the_page_says_beside_the_verdict_whether_the_requirements_are_met(alice_client, alice, finned_report,
                                                                          make_done_check):
    """The finned plate (3 mm thick) against a 1.5 mm thickness target: the banner and the table say it misses."""
    from services.requirement_check import check_requirements
    from services.requirements import Requirements

    targets = check_requirements(Requirements(max_thickness_mm=1.5, max_diameter_mm=40), optics=finned_report.optics,
                                 bbox_mm=tuple(finned_report.design["bbox_mm"]))
    report = replace(finned_report, findings=(*finned_report.findings, *targets.findings),
                     meets_requirements=targets.meets, requirements=targets.to_dict())
    check = make_done_check(alice, report)
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    banner = page[page.index('id="verdict"'):page.index('id="findings"')]
    assert 'id="meets-requirements">Misses its requirements<' in banner and "Not printable" in banner
    assert "missed as designed" in banner and "at most 1.5 mm" in banner
    assert "· 1 target missed" in banner  # beside the print counts, which leave requirements out
    # Each target's finding is badged by what became of it, not as a blocker the counts above leave out.
    badges = re.findall(r'<span class="sev sev-\w+">\d+ · ([^<]+)</span> Requirement', page)
    assert sorted(badges) == ["target met", "target missed"]
    listing = alice_client.get(reverse("designs")).content.decode()
    assert "Misses its requirements" in listing


def test_the_changes_that_meet_missed_targets_show_on_the_page_and_in_the_pdf(alice_client, alice, finned_report,
                                                                               make_done_check):
    """A change the check tried for a missed loss target: its sentence and the value it gave, page and PDF."""
    from services.target_changes import TargetChange, TargetResult

    change = TargetChange("print it in HIPS filament on the same printer", "material", "bay2-filament", "hips", met=1,
                          missed=0, results=(TargetResult("insertion loss", "met", 0.0625, "dB", "at most 0.7 dB"),))
    check = make_done_check(alice, replace(finned_report, target_changes=(change,)))
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    section = page[page.index('id="target-changes"'):]
    assert "Print it in HIPS filament on the same printer" in section
    assert "Insertion loss 0.0625 dB (wanted at most 0.7 dB): met" in section
    pdf = alice_client.get(reverse("check_pdf", args=[check.public_id]))
    text = "".join(p.extract_text() for p in PdfReader(io.BytesIO(b"".join(pdf.streaming_content)
                                                                   if pdf.streaming else pdf.content)).pages)
    assert "What would meet the missed targets" in text and "insertion loss 0.0625 dB" in text


def test_changes_the_search_left_unfinished_are_named_on_the_page_in_the_pdf_and_in_text(alice_client, alice,
                                                                                           finned_report, make_done_check):
    """A change stopped by the search's time is named as not judged, so "nothing found" never stands for "not tried"."""
    from services.render.text import report_text

    unfinished = ("build it along +x on the same printer", "build it along +y on the same printer")
    report = replace(finned_report, what_to_change=(), changes_unfinished=unfinished)
    check = make_done_check(alice, report)
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    section = page[page.index('id="what-to-change"'):page.index("</section>", page.index('id="what-to-change"'))]
    assert "None of the changes finished within the search" in section
    assert "so not judged: build it along +x on the same printer; build it along +y on the same printer." in section
    pdf = alice_client.get(reverse("check_pdf", args=[check.public_id]))
    text = " ".join(p.extract_text() for p in PdfReader(io.BytesIO(b"".join(pdf.streaming_content)
                                                                    if pdf.streaming else pdf.content)).pages)
    assert "What would remove the blockers" in text and "build it along +y on the same printer" in " ".join(text.split())
    lines = report_text(report.to_dict())
    assert "not finished within the search's time (not judged): build it along +x" in lines


def test_instances_show_on_the_page_and_in_the_csv(alice_client, make_done_check, alice, make_report_with_instances):
    """A grouped finding's instances: a table on the page with a "show" link per row, every one in the CSV
    download (RFC 4180 rows, read back with Python's csv module)."""
    import csv
    import io

    report = make_report_with_instances
    check = make_done_check(alice, report)
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    finding = next(f for f in report.to_dict()["findings"] if len(f["instances"]) > 1)
    assert f"the {finding['count']} instances" in page or f"of {finding['count']} instances" in page
    assert page.count('class="pv-show"') >= len(finding["instances"])
    response = alice_client.get(reverse("check_findings_csv", args=[check.public_id]))
    assert response["Content-Type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(response.content.decode())))
    mine = [r for r in rows if r["rule"] == finding["rule"]]
    assert len(mine) == len(finding["instances"])
    assert [float(r["measured"]) for r in mine] == [i["measured"] for i in finding["instances"]]
