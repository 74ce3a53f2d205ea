"""The report's 3D view in a real browser: the canvas draws the part, markers are clickable and jump to their finding."""

from pathlib import Path
from unittest import mock

import pytest

from tests.webapp.e2e.test_designer_flow import VIEWPORT
from tests.webapp.parts import finned_plate_stl

pytestmark = [pytest.mark.e2e, pytest.mark.slow, pytest.mark.django_db(transaction=True)]

VENDORED = Path(__file__).resolve().parents[3] / "webapp" / "static" / "vendor" / "three" / "three.module.min.js"

# The share of canvas pixels that differ from the background colour (the part and the plate were drawn).
DRAWN_SHARE = """() => {
  const canvas = document.querySelector("#part-view canvas");
  const copy = document.createElement("canvas");
  copy.width = canvas.width; copy.height = canvas.height;
  const ctx = copy.getContext("2d");
  ctx.drawImage(canvas, 0, 0);
  const data = ctx.getImageData(0, 0, copy.width, copy.height).data;
  let drawn = 0;
  for (let i = 0; i < data.length; i += 4) {
    if (Math.abs(data[i] - 0xf7) + Math.abs(data[i + 1] - 0xf6) + Math.abs(data[i + 2] - 0xf1) > 24) drawn++;
  }
  return drawn / (data.length / 4);
}"""


def test_the_3d_view_draws_the_part_and_its_markers_open_findings(browser, live_server, alice, seeded, shots):
    if not VENDORED.exists():
        pytest.skip("the viewer library is not vendored (run `make vendor`)")
    from services import catalogue
    from services.intake import read_part
    from services.report import build_report
    from services.settings import CheckSettings
    from webapp.catalogue.models import Material, Printer
    from webapp.checks import services

    part = read_part(finned_plate_stl(), name="finned.stl", units="mm")
    printer = {p.slug: p for p in catalogue.printers()}["bay1-lcd-resin"]
    material = {m.slug: m for m in catalogue.materials()}["standard-resin"]
    report = build_report(part=part, printer=printer, material=material, settings=CheckSettings())
    design = services.design_create(owner=alice, name="finned.stl", data=finned_plate_stl(), units="mm")
    with mock.patch("webapp.checks.queue.send_run_check"):
        check = services.check_create(owner=alice, design=design, printer=Printer.objects.get(slug=printer.slug),
                                      material=Material.objects.get(slug=material.slug), check_settings=CheckSettings())
    services.report_store(check=check, report=report)

    page = browser.new_context(viewport=VIEWPORT).new_page()
    page.goto(f"{live_server.url}/login/")
    page.fill("#id_username", "alice")
    page.fill("#id_password", "alice-password-1")
    page.click("button[type=submit]")
    page.wait_for_url("**/designs/")
    page.goto(f"{live_server.url}/checks/{check.public_id}/#part-view")
    page.wait_for_function("window.phasewrightPartView === 'ready' || window.phasewrightPartView === 'failed'")
    assert page.evaluate("window.phasewrightPartView") == "ready", page.text_content("#part-view .pv-status")
    assert page.evaluate(DRAWN_SHARE) > 0.05
    page.locator("#part-view").screenshot(path=str(shots / "report-3d-view.png"))
    page.evaluate("window.scrollTo(0, 0)")
    page.screenshot(path=str(shots / "report-verdict.png"))

    located = [i for i, f in enumerate(report.to_dict()["findings"], start=1) if f["location_mm"]]
    markers = page.locator("#part-view .pv-marker")
    assert located and 1 <= markers.count() <= len(located)
    page.evaluate("document.querySelector('#part-view .pv-stage').scrollIntoView({block: 'center'})")
    first = page.locator("#part-view .pv-marker:not([hidden])").first
    number = first.text_content().split(",")[0]
    first.click()
    assert page.url.endswith(f"#finding-{number}")
    assert page.locator(f"#finding-{number}").is_visible()

    # "show in 3D" beside a finding cuts the view at its layer and rings its place.
    show = page.locator("a.pv-show").first
    layer = show.get_attribute("data-show-layer")
    show.click()
    assert page.input_value("#part-view .pv-layer") == layer
    assert page.locator("#part-view .pv-focus").is_visible()

    # The layer slider cuts the part: at the first layer, findings that start higher up are hidden.
    page.fill("#part-view .pv-layer", "0")
    page.dispatch_event("#part-view .pv-layer", "input")
    assert page.text_content("#part-view .pv-layer-text").startswith("Layer 1 of ")
    page.check("#part-view input[value=printed]")
    assert page.evaluate(DRAWN_SHARE) > 0.01
