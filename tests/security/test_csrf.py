"""CSRF on every form and every URL that takes a POST from a signed-in browser."""

import re

import pytest
from django.test import Client
from django.urls import Resolver404, resolve

from tests.security.personas import Persona, candidates
from tests.security.urlsweep import fill, routes

pytestmark = pytest.mark.django_db

def _resolves(path: str) -> bool:
    """Return True when the path reaches a view of ours (not the API's catch-all for unknown paths)."""
    try:
        match = resolve(path)
    except Resolver404:
        return False
    return match.url_name is not None


_FORM = re.compile(rb"(?is)<form\b([^>]*)>(.*?)</form>")


def test_every_post_form_carries_a_csrf_token(world, alice, bob):
    """Each page a signed-in user (designer or lab manager) can open: every POST form holds the token."""
    values, _ = candidates(world, alice)
    checked = 0
    for user in (alice, bob):
        person = Persona(user, None)
        for route in routes():
            if route.route.startswith("api/"):
                continue
            for path in fill(route, values)[:4]:
                status, body, _ = person.ask("GET", path)
                if status != 200 or b"<form" not in body:
                    continue
                for attrs, inner in _FORM.findall(body):
                    if re.search(rb"method=[\"']?post", attrs, re.I):
                        assert b'name="csrfmiddlewaretoken"' in inner, (user.username, path)
                        checked += 1
    assert checked >= 5  # sign-out, upload, the catalogue's forms: the sweep found real forms


def test_every_url_refuses_a_post_without_the_token(world, alice):
    """A signed-in browser's POST without the CSRF token is refused (403), or the URL takes no POST (405)."""
    values, _ = candidates(world, alice)
    browser = Client(enforce_csrf_checks=True)
    browser.force_login(alice)
    refused = 0
    for route in routes():
        for path in fill(route, values)[:4]:
            if not _resolves(path):
                continue  # a filled value the converter rejects: no view, nothing to protect
            response = browser.post(path, {"name": "x"})
            assert response.status_code in (403, 405), (path, response.status_code)
            refused += response.status_code == 403
            if "logout" in path:
                browser.force_login(alice)
    assert refused >= 20
