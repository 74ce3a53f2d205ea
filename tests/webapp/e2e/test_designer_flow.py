"""In a real browser against the live site and a real worker: upload, follow, read, download; and who sees what.

Run with ``PHASEWRIGHT_SCREENSHOTS=docs/screenshots`` to refresh the README's screenshots.
"""

import io
import os
from pathlib import Path

import pytest
from django.conf import settings
from pypdf import PdfReader

from tests.webapp.parts import finned_plate_stl
from tests.webapp.worker import broker, worker_process

pytestmark = [pytest.mark.e2e, pytest.mark.slow, pytest.mark.django_db(transaction=True)]

VIEWPORT = {"width": 1280, "height": 900}
UNSTICK = ".in-page { position: static !important; }"  # the sticky section bar would cover a section's picture

# Log every value the progress bar shows, across reloads, so the test can follow it to the end.
WATCH_PROGRESS = """
window.addEventListener("DOMContentLoaded", () => {
  const bar = document.getElementById("progress-bar");
  if (!bar) return;
  const say = () => console.log("progress " + bar.getAttribute("aria-valuenow"));
  say();
  new MutationObserver(say).observe(bar, {attributes: true, attributeFilter: ["aria-valuenow"]});
});
"""

# A drag-and-drop payload holding one file, as a browser builds it when a file is dropped.
DROP_FILE = """([name, bytes]) => {
  const transfer = new DataTransfer();
  transfer.items.add(new File([new Uint8Array(bytes)], name, {type: "model/stl"}));
  return transfer;
}"""

# Load lazy pictures, wait for every picture, and return (source, natural width) of each.
LOAD_IMAGES = """
async () => {
  const images = Array.from(document.images);
  images.forEach(img => { img.loading = "eager"; });
  await Promise.all(images.map(img => img.complete ? null : new Promise(done => { img.onload = img.onerror = done; })));
  return images.map(img => [img.currentSrc, img.naturalWidth]);
}
"""


def _sign_in(browser, live_server, username: str, password: str):
    page = browser.new_context(viewport=VIEWPORT, accept_downloads=True).new_page()
    page.goto(f"{live_server.url}/login/")
    page.fill("#id_username", username)
    page.fill("#id_password", password)
    page.click("button[type=submit]")
    page.wait_for_url("**/designs/")
    return page


def _assert_no_broken_images(page) -> int:
    images = page.evaluate(LOAD_IMAGES)
    assert images and all(width > 0 for _, width in images), [src for src, width in images if width == 0]
    return len(images)


MID_WAY_OR_DONE = """() => {
  if (document.getElementById("verdict")) return true;
  const bar = document.getElementById("progress-bar");
  const v = bar ? +bar.getAttribute("aria-valuenow") : 0;
  return v > 0 && v < 100;
}"""


def _follow_to_report(page, progress: list[int], shot: Path | None = None) -> None:
    """Watch the bar on the check page until the page turns into the report; picture it on the way if it is slow enough."""
    progress.clear()
    page.wait_for_function(MID_WAY_OR_DONE, timeout=180_000)
    if shot is not None and not page.locator("#verdict").count():
        page.screenshot(path=str(shot))
    page.wait_for_selector("#verdict", timeout=180_000)
    assert progress and progress[-1] == 100 and progress == sorted(progress), progress


def test_a_designer_checks_parts_in_the_browser(browser, live_server, alice, seeded, shots):
    """Drop a part with a 0.1 mm fin on the upload zone, follow the bar to the end through a reload, read the
    finding with its picture, download the PDF; generate a lens and read its optics."""
    page = _sign_in(browser, live_server, "alice", "alice-password-1")
    progress: list[int] = []
    page.on("console", lambda msg: msg.text.startswith("progress ") and progress.append(int(msg.text.split()[1])))
    page.add_init_script(WATCH_PROGRESS)
    with broker("filesystem://", settings.FOLDER_BROKER_OPTIONS):  # one producer pool from the first upload on
        page.click("nav >> text=Check a part")
        page.screenshot(path=str(shots / "upload-form.png"), full_page=True)
        dropped = page.evaluate_handle(DROP_FILE, ["finned.stl", list(finned_plate_stl())])
        page.dispatch_event("#dropzone", "drop", {"dataTransfer": dropped})
        assert page.text_content("#file-list").startswith("finned.stl")
        page.select_option("#id_units", "mm")
        page.fill("#id_freqs", "140")
        page.click("#submit-button")
        page.wait_for_url("**/checks/*/")
        page.reload()  # before any worker runs: the page comes back showing the same waiting check
        assert page.get_attribute("#progress-bar", "aria-valuenow") == "0"
        assert page.text_content("#status-line") == "Waiting for a worker"  # the same words as in the lists

        with worker_process():
            _follow_to_report(page, progress)
            assert page.text_content(".verdict-word") == "Not printable"
            finding = page.locator("article.finding", has_text="Minimum feature")
            # The rule's wording and limits belong to the rules; the measured width is the part's own 0.1 mm.
            assert finding.count() == 1 and "widen" in finding.text_content() and "0.100 mm" in finding.text_content()
            assert finding.locator("img").count() == 1
            assert _assert_no_broken_images(page) >= 5
            page.screenshot(path=str(shots / "report-top.png"))
            page.locator("#findings").screenshot(path=str(shots / "report-findings.png"), style=UNSTICK)
            with page.expect_download() as download:
                page.click("#download-pdf")
            text = "\n".join(p.extract_text() for p in PdfReader(io.BytesIO(Path(download.value.path()).read_bytes())).pages)
            assert "finned.stl" in text and "Not printable" in text and "Minimum feature" in text

            page.click("nav >> text=Check a part")
            page.click(".tabs >> text=zoned")
            # The demo's 60 mm lens for the README's pictures; a 30 mm one (a quarter of the work) otherwise.
            diameter_mm = 60 if os.environ.get("PHASEWRIGHT_SCREENSHOTS") else 30
            page.fill("#id_part_diameter_mm", str(diameter_mm))
            page.fill("#id_part_focal_length_mm", str(1.2 * diameter_mm))
            page.click("button[type=submit]")
            page.wait_for_url("**/checks/*/")
            _follow_to_report(page, progress, shots / "check-in-progress.png")
    assert page.text_content(".verdict-word") in ("Printable", "Printable with cautions")
    assert page.locator("#optics table tbody tr").count() == 1
    assert "140.0" in page.text_content("#optics table tbody")
    _assert_no_broken_images(page)
    page.locator("#optics").screenshot(path=str(shots / "report-optics.png"), style=UNSTICK)
    page.click("nav >> text=Designs & checks")
    assert page.locator(".designs-table tbody tr").count() == 2
    page.screenshot(path=str(shots / "designs-list.png"))


def test_who_sees_what(browser, live_server, alice, bob, charlie, seeded, django_user_model):
    """Charlie gets 404 for alice's report; only bob, a lab manager, finds the catalogue in the menu and edits it."""
    from unittest import mock

    from services.settings import CheckSettings
    from tests.webapp.parts import box_stl
    from webapp.catalogue.models import Material, Printer
    from webapp.checks import services

    design = services.design_create(owner=alice, name="box.stl", data=box_stl(), units="mm")
    with mock.patch("webapp.checks.queue.send_run_check"):
        check = services.check_create(owner=alice, design=design, printer=Printer.objects.get(slug="bay1-lcd-resin"),
                                      material=Material.objects.get(slug="standard-resin"), check_settings=CheckSettings())
    stranger = _sign_in(browser, live_server, "charlie", "charlie-password")
    assert stranger.goto(f"{live_server.url}/checks/{check.public_id}/").status == 404
    assert "box.stl" not in stranger.content()

    manager = _sign_in(browser, live_server, "bob", "bob-password-12")
    manager.click("nav >> text=Printers, materials & prices")
    assert manager.locator("h1").text_content().strip() == "Printer profiles"
    assert manager.goto(f"{live_server.url}/catalogue/printers/new/").status == 200

    designer = _sign_in(browser, live_server, "alice", "alice-password-1")
    assert designer.locator("nav >> text=Printers, materials & prices").count() == 0
    assert designer.goto(f"{live_server.url}/catalogue/printers/new/").status == 403
