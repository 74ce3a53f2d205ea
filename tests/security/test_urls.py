"""Every URL of the site and the API, as charlie (a signed-in stranger) and as an anonymous visitor.

The URLs come from Django's resolver (tests/security/urlsweep.py), so a URL added later is covered
without a new test. Each is filled with the ids of alice's objects (a design, a finished check with
its pictures, a print log, an API token) and the catalogue's names.
"""

from __future__ import annotations

import pytest
from django.apps import apps
from django.contrib.auth import get_user_model
from django.db import models
from django.test import Client

from tests.security.urlsweep import Candidates, fill, names_any, routes, stranger_version
from tests.webapp.parts import box_stl

pytestmark = pytest.mark.django_db

SECRET_NAME = "alice-private-lens-7f3a.stl"
# Answers anonymous visitors may get with a page: signing in, and the API's own description.
PUBLIC_ROUTE_NAMES = {"login", "api_index", "openapi-json", "api-root", "view_on_site"}
REFUSED = {302, 400, 401, 403, 404, 405, 422, 429}


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
    _print_log(alice, check)
    tokens = {user.username: _api_token(user) for user in (alice, charlie)}
    return {"check": check, "design": design, "tokens": tokens}


def _print_log(user, check) -> None:
    try:
        from webapp.catalogue.services import print_log_create
    except ImportError:
        return
    print_log_create(user=user, check=check, actual_print_time_s=3600.0, succeeded=True)


def _api_token(user) -> str | None:
    try:
        from webapp.api.services import api_token_create
    except ImportError:
        return None
    return api_token_create(user=user, name="sweep")[1]


def _owned_ids(user) -> tuple[list[str], list[str]]:
    """Return the UUIDs and primary keys of every row that belongs to the user, in any app's model."""
    uuids, pks = [], []
    for model in apps.get_models():
        owner_fields = [f.name for f in model._meta.fields if isinstance(f, models.ForeignKey)
                        and f.related_model is get_user_model() and f.name in ("owner", "user", "logged_by")]
        uuid_fields = [f.name for f in model._meta.fields if isinstance(f, models.UUIDField) and f.unique]
        for field in owner_fields:
            for row in model.objects.filter(**{field: user}):
                uuids += [str(getattr(row, name)) for name in uuid_fields]
                pks.append(str(row.pk))
    return sorted(set(uuids)), sorted(set(pks))


def _candidates(world, alice) -> tuple[Candidates, list[str]]:
    from webapp.catalogue.models import Material, Printer

    uuids, pks = _owned_ids(alice)
    report = world["check"].report
    words = sorted(report["figures"])[:3] + ["transmission.s2p", "report.pdf"]
    words += [Printer.objects.order_by("pk").first().slug, Material.objects.order_by("pk").first().slug]
    words += ["zoned"]  # a component kind, for the parametric pages
    return Candidates(uuids=uuids, ints=pks[:2], words=words), uuids + pks


def _markers(world) -> list[bytes]:
    return [SECRET_NAME.encode(), str(world["check"].public_id).encode(), str(world["design"].public_id).encode()]


class Persona:
    """A signed-in user's browser and API client, signed in again after a sign-out URL."""

    def __init__(self, user, token: str | None) -> None:
        self.user = user
        self.browser = Client()
        self.browser.force_login(user)
        self.api = Client(HTTP_AUTHORIZATION=f"Bearer {token}") if token else self.browser

    def ask(self, method: str, path: str):
        answer = _ask(self.api if path.startswith("/api/") else self.browser, method, path)
        if "logout" in path:
            self.browser.force_login(self.user)
        return answer


def _ask(client: Client, method: str, path: str):
    response = client.generic(method, path)
    body = b"".join(response.streaming_content) if response.streaming else response.content
    return response.status_code, body, response.get("Location", "")


def _lands_on(location: str, client: Client | None = None) -> str:
    """Follow a redirect chain (a page that moved, then the sign-in) and return where it ends."""
    client = client or Client()
    for _ in range(5):
        response = client.get(location)
        if response.status_code != 302:
            return location
        location = response["Location"]
    return location


def _site_routes():
    return [r for r in routes() if not r.is_admin]


def test_the_sweep_sees_the_site_and_the_api():
    """The resolver walk finds the designer's pages, the API and the admin (so the sweep is not vacuous)."""
    found = {r.route for r in routes()}
    assert {"designs/", "checks/<uuid:public_id>/status.json", "admin/"} <= found
    assert any(r.startswith("api/") for r in found)


@pytest.mark.slow
def test_charlie_cannot_tell_alices_things_from_nothing(world, alice, charlie):
    """For every URL naming one of alice's objects, charlie gets what a made-up id gets: 404, never her data."""
    values, owned = _candidates(world, alice)
    stranger, owner = Persona(charlie, world["tokens"]["charlie"]), Persona(alice, world["tokens"]["alice"])
    reached = set()
    for route in _site_routes():
        for path in fill(route, values):
            if not names_any(path, owned):
                continue
            made_up = stranger_version(path, owned)
            for method in ("GET", "POST"):
                status, body, _ = stranger.ask(method, path)
                fresh_status, _, _ = stranger.ask(method, made_up)
                assert status == fresh_status and status in REFUSED, (method, path, status, fresh_status)
                assert status != 302 or "login" not in path
                assert not any(m in body for m in _markers(world)), (method, path)
                if method == "GET":
                    assert status in (404, 405), (path, status)
            if owner.ask("GET", path)[0] != 404:
                reached.add(route.route)
    # Alice herself reaches her objects through most of these URLs, so the 404s above mean something.
    assert {"checks/<uuid:public_id>/", "checks/<uuid:public_id>/files/<str:name>", "designs/<uuid:public_id>/"} <= reached


@pytest.mark.slow
def test_charlie_sees_nothing_of_alices_anywhere_else(world, alice, charlie):
    """Lists, forms and catalogue pages answer charlie without alice's design name or ids."""
    values, owned = _candidates(world, alice)
    stranger = Persona(charlie, world["tokens"]["charlie"])
    for route in _site_routes():
        for path in fill(route, values):
            if names_any(path, owned):
                continue
            for method in ("GET", "POST"):
                status, body, _ = stranger.ask(method, path)
                assert status < 500, (method, path, status)
                assert not any(m in body for m in _markers(world)), (method, path, status)


@pytest.mark.slow
def test_an_anonymous_visitor_is_sent_to_sign_in_or_refused(world, alice):
    """Every URL but the public few redirects to sign-in (site) or refuses (API); none shows alice's data."""
    values, _ = _candidates(world, alice)
    for route in _site_routes():
        for path in fill(route, values):
            for method in ("GET", "POST"):
                status, body, location = _ask(Client(), method, path)
                assert status < 500, (method, path, status)
                assert not any(m in body for m in _markers(world)), (method, path)
                if route.name in PUBLIC_ROUTE_NAMES:
                    continue
                assert status in REFUSED, (method, path, status)
                if status == 302:
                    assert _lands_on(location).startswith("/login/") or route.name == "logout", (path, location)


@pytest.mark.slow
def test_the_admin_lets_in_staff_only(world, alice, charlie):
    """Every admin URL sends charlie and anonymous visitors to the admin sign-in, or refuses them."""
    values, _ = _candidates(world, alice)
    stranger = Persona(charlie, None).browser
    for route in routes():
        if not route.is_admin or route.name in ("login", "view_on_site"):
            continue
        for path in fill(route, values)[:3]:
            for client in (stranger, Client()):
                status, body, location = _ask(client, "GET", path)
                assert status in (302, 404, 405), (path, status)
                assert status != 302 or _lands_on(location, client).startswith("/admin/login/"), (path, location)
                assert not any(m in body for m in _markers(world)), path
