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
        with mock.patch("webapp.checks.queue.send_run_check"):
            check = services.check_create(owner=owner, design=design, printer=Printer.objects.get(slug=printer),
                                          material=Material.objects.get(slug=material), check_settings=CheckSettings())
        services.report_store(check=check, report=report)
        check.refresh_from_db()
        return check
    return make


@pytest.fixture
def make_report_with_instances():
    """A real report of a plate with three fins under the LCD resin printer's 0.15 mm minimum feature."""
    import trimesh

    from services import catalogue
    from services.intake import part_from_arrays
    from services.report import build_report
    from services.settings import CheckSettings, OpticsSettings

    parts = [trimesh.creation.box(extents=(20, 12, 1))]
    parts[0].apply_translation((10, 6, 0.5))
    for i, w in enumerate((0.08, 0.1, 0.12)):
        fin = trimesh.creation.box(extents=(w, 8, 2))
        fin.apply_translation((3 + 4 * i, 6, 2.0))
        parts.append(fin)
    mesh = trimesh.boolean.union(parts, engine="manifold")
    part = part_from_arrays(mesh.vertices, mesh.faces, name="fins.stl")
    printer = {p.slug: p for p in catalogue.printers()}["bay1-lcd-resin"]
    material = {m.slug: m for m in catalogue.materials()}["standard-resin"]
    return build_report(part=part, printer=printer, material=material,
                        settings=CheckSettings(optics=OpticsSettings(freqs_ghz=(140.0,))))
