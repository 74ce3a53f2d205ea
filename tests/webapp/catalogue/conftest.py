"""Fixtures of the catalogue tests: seeded profiles, checks with estimates, and form data as a browser posts it."""

from unittest import mock

import pytest

from services.settings import CheckSettings
from tests.webapp.parts import box_stl
from webapp.catalogue.models import Material, Printer
from webapp.checks import services as check_services
from webapp.checks.models import Check, Design


@pytest.fixture
def bay1(seeded):
    return Printer.objects.get(slug="bay1-lcd-resin")


@pytest.fixture
def bay3(seeded):
    return Printer.objects.get(slug="bay3-laser-resin")


@pytest.fixture
def resin(seeded):
    return Material.objects.get(slug="standard-resin")


def estimated_check(owner, printer, material, *, print_time_s: float, material_ml: float = 2.0,
                    factor: float | None = None, quantities=()) -> Check:
    """Return a finished check whose report carries only an estimate (enough for logging prints)."""
    design = Design.objects.create(owner=owner, name=f"part-{print_time_s:.0f}.stl", sha256="0" * 64, stored_name="none")
    estimate = {"print_time_s": print_time_s, "material_ml": material_ml, "calibrated": factor is not None,
                "calibration": {"factor": factor, "count": 3, "spread": 0.05} if factor is not None else None,
                "quantities": list(quantities)}
    return Check.objects.create(owner=owner, design=design, printer=printer, material=material,
                                printer_snapshot=printer.snapshot().to_dict(), material_snapshot=material.snapshot().to_dict(),
                                status=Check.DONE, report={"estimate": estimate}, verdict="printable")


def run_real_check(owner, printer, material) -> Check:
    """Submit a small box and run the whole pipeline in this process; return the finished check."""
    design = check_services.design_create(owner=owner, name="box.stl", data=box_stl(), units="mm")
    with mock.patch("webapp.checks.queue.send_run_check"):
        check = check_services.check_create(owner=owner, design=design, printer=printer, material=material,
                                            check_settings=CheckSettings(quantities=(1, 5)))
    check_services.check_run(check_id=check.pk)
    check.refresh_from_db()
    assert check.status == Check.DONE, check.error
    return check


def posted(form, **changes) -> dict:
    """Return the POST body a browser sends for an unbound form as shown, with some values changed."""
    body = {}
    for field in form:
        value = field.value()
        if value is None:
            continue
        body[field.html_name] = [str(v) for v in value] if isinstance(value, (list, tuple)) else str(value)
    body.update({k: str(v) for k, v in changes.items()})
    return body
