"""Every URL of the site and the API, as charlie (a signed-in stranger) and as an anonymous visitor.

The URLs come from Django's resolver (tests/security/urlsweep.py), so a URL added later is covered
without a new test. Each is filled with the ids of alice's objects (a design, a finished check with
its pictures, a print log, an API token) and the catalogue's names.
"""

from __future__ import annotations

import pytest
from django.test import Client

from tests.security.personas import Persona, ask, candidates, lands_on, markers
from tests.security.urlsweep import fill, names_any, routes, stranger_version

pytestmark = pytest.mark.django_db

# Answers anonymous visitors may get with a page: signing in, and the API's own description.
PUBLIC_ROUTE_NAMES = {"login", "api_index", "openapi-json", "api-root", "view_on_site"}
REFUSED = {302, 400, 401, 403, 404, 405, 422, 429}


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
    values, owned = candidates(world, alice)
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
                assert not any(m in body for m in markers(world)), (method, path)
                if method == "GET":
                    assert status in (404, 405), (path, status)
            if owner.ask("GET", path)[0] != 404:
                reached.add(route.route)
    # Alice herself reaches her objects through most of these URLs, so the 404s above mean something.
    assert {"checks/<uuid:public_id>/", "checks/<uuid:public_id>/files/<str:name>", "designs/<uuid:public_id>/"} <= reached


@pytest.mark.slow
def test_charlie_sees_nothing_of_alices_anywhere_else(world, alice, charlie):
    """Lists, forms and catalogue pages answer charlie without alice's design name or ids."""
    values, owned = candidates(world, alice)
    stranger = Persona(charlie, world["tokens"]["charlie"])
    for route in _site_routes():
        for path in fill(route, values):
            if names_any(path, owned):
                continue
            for method in ("GET", "POST"):
                status, body, _ = stranger.ask(method, path)
                assert status < 500, (method, path, status)
                assert not any(m in body for m in markers(world)), (method, path, status)


@pytest.mark.slow
def test_an_anonymous_visitor_is_sent_to_sign_in_or_refused(world, alice):
    """Every URL but the public few redirects to sign-in (site) or refuses (API); none shows alice's data."""
    values, _ = candidates(world, alice)
    for route in _site_routes():
        for path in fill(route, values):
            for method in ("GET", "POST"):
                status, body, location = ask(Client(), method, path)
                assert status < 500, (method, path, status)
                assert not any(m in body for m in markers(world)), (method, path)
                if route.name in PUBLIC_ROUTE_NAMES:
                    continue
                assert status in REFUSED, (method, path, status)
                if status == 302:
                    assert lands_on(location).startswith("/login/") or route.name == "logout", (path, location)


@pytest.mark.slow
def test_the_admin_lets_in_staff_only(world, alice, charlie):
    """Every admin URL sends charlie and anonymous visitors to the admin sign-in, or refuses them."""
    values, _ = candidates(world, alice)
    stranger = Persona(charlie, None).browser
    for route in routes():
        if not route.is_admin or route.name in ("login", "view_on_site"):
            continue
        for path in fill(route, values)[:3]:
            for client in (stranger, Client()):
                status, body, location = ask(client, "GET", path)
                assert status in (302, 404, 405), (path, status)
                assert status != 302 or lands_on(location, client).startswith("/admin/login/"), (path, location)
                assert not any(m in body for m in markers(world)), path
