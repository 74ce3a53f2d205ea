"""Finished checks for the page tests: one real report, built once, stored as the worker stores it."""

from dataclasses import replace
from unittest import mock

import pytest

from tests.webapp.parts import finned_plate_stl


@pytest.fixture(scope="session")
def finned_report():
    """A real report of the plate with a 0.1 mm fin on the LCD resin printer at 140 GHz (two blockers)."""
    from services import catalogue
    from services.intake import read_part
    from services.report import build_report
    from services.settings import CheckSettings, OpticsSettings

    part = read_part(finned_plate_stl(), name="finned.stl", units="mm")
    printer = {p.slug: p for p in catalogue.printers()}["bay1-lcd-resin"]
    material = {m.slug: m for m in catalogue.materials()}["standard-resin"]
    settings = CheckSettings(quantities=(1, 5), optics=OpticsSettings(freqs_ghz=(140.0,)))
    return build_report(part=part, printer=printer, material=material, settings=settings)


@pytest.fixture
def fixed_report(finned_report):
    """The same report as if the fin had been widened: no findings, a little dearer."""
    estimate = {**finned_report.estimate, "cost": {**finned_report.estimate["cost"],
                                                   "total": finned_report.estimate["cost"]["total"] + 1.0}}
    return replace(finned_report, findings=(), verdict="printable", estimate=estimate)


@pytest.fixture
def make_done_check(seeded):
    """Return make(owner, report, printer=..., material=..., design=None, revision_of=None) -> a finished Check."""
    from services.settings import CheckSettings
    from webapp.catalogue.models import Material, Printer
    from webapp.checks import services

    def make(owner, report, *, printer="bay1-lcd-resin", material="standard-resin", design=None, revision_of=None,
             name="finned.stl"):
        if design is None:
            design = services.design_create(owner=owner, name=name, data=finned_plate_stl(), units="mm",
                                            revision_of=revision_of)
        with mock.patch("webapp.checks.tasks.run_check.delay"):
            check = services.check_create(owner=owner, design=design, printer=Printer.objects.get(slug=printer),
                                          material=Material.objects.get(slug=material), check_settings=CheckSettings())
        services.report_store(check=check, report=report)
        check.refresh_from_db()
        return check
    return make
