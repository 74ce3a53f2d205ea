"""Reading a finished check: the report page, its PDF and JSON, comparisons and revisions."""

import io
import re
from unittest import mock

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
    for name in ("perspective.png", "thickness_map.png", "optics_loss.png"):
        assert reverse("check_file", args=[check.public_id, name]) in page
    assert f"{finned_report.estimate['cost']['total']:,.2f}" in page and "Set-up labour" in page
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
    with mock.patch("services.pdf_report.report_pdf") as draw:
        again = alice_client.get(url)
    assert again.content == response.content and not draw.called


def test_the_json_report_downloads(alice_client, finned_report, make_done_check, alice):
    check = make_done_check(alice, finned_report)
    response = alice_client.get(reverse("check_report_json", args=[check.public_id]))
    assert response.json()["verdict"] == "not_printable" and "attachment" in response["Content-Disposition"]


def test_a_failed_check_says_what_happened_and_what_to_do(alice_client, alice, seeded):
    """The failure's sentence and a next step, with no progress bar left running."""
    from services.settings import CheckSettings
    from webapp.catalogue.models import Material, Printer

    design = services.design_create(owner=alice, name="noise.stl", data=b"\x00" * 100)
    with mock.patch("webapp.checks.tasks.run_check.delay"):
        check = services.check_create(owner=alice, design=design, printer=Printer.objects.get(slug="bay1-lcd-resin"),
                                      material=Material.objects.get(slug="standard-resin"), check_settings=CheckSettings())
    services.check_fail(check_id=check.pk, code="not_a_mesh", message="noise.stl: this is not a mesh file.")
    page = alice_client.get(reverse("check", args=[check.public_id])).content.decode()
    assert "noise.stl: this is not a mesh file." in page and "What to do:" in page and "progressbar" not in page


def test_a_revision_shows_what_changed(alice_client, alice, finned_report, fixed_report, make_done_check):
    """Revision 2 joins the family; its report links to the comparison, which lists the fixed findings and deltas."""
    first = make_done_check(alice, finned_report)
    with mock.patch("webapp.checks.tasks.run_check.delay"):
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
    from services.report_tables import rule_label

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
    with mock.patch("webapp.checks.tasks.run_check.delay"):
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
