"""Alice's world for the URL and CSRF sweeps: a design, a finished check, a print log, API tokens."""

import pytest

from tests.security.personas import SECRET_NAME, api_token, print_log
from tests.webapp.parts import box_stl


@pytest.fixture
def world(alice, charlie, seeded, django_capture_on_commit_callbacks):
    """Alice's design, finished check, print log and API token; charlie's API token."""
    from tests.reliability.helpers import QUICK
    from webapp.catalogue.models import Material, Printer
    from webapp.checks import services

    design = services.design_create(owner=alice, name=SECRET_NAME, data=box_stl(), units="mm")
    with django_capture_on_commit_callbacks():
        check = services.check_create(owner=alice, design=design, printer=Printer.objects.get(slug="bay1-lcd-resin"),
                                      material=Material.objects.get(slug="standard-resin"), check_settings=QUICK)
    services.check_run(check_id=check.pk)
    check.refresh_from_db()
    assert check.status == "done", check.error
    print_log(alice, check)
    tokens = {user.username: api_token(user) for user in (alice, charlie)}
    return {"check": check, "design": design, "tokens": tokens}
