"""Alice's world and the ways to ask the site for it, shared by the URL and CSRF sweeps."""

from __future__ import annotations

from django.apps import apps
from django.contrib.auth import get_user_model
from django.db import models
from django.test import Client

from tests.security.urlsweep import Candidates

SECRET_NAME = "alice-private-lens-7f3a.stl"


def print_log(user, check) -> None:
    """Log a print of the check, when the catalogue app offers it."""
    try:
        from webapp.catalogue.services import print_log_create
    except ImportError:
        return
    print_log_create(user=user, check=check, actual_print_time_s=3600.0, succeeded=True)


def api_token(user) -> str | None:
    """Return a new API token for the user, when the API app is there."""
    try:
        from webapp.api.services import api_token_create
    except ImportError:
        return None
    return api_token_create(user=user, name="sweep")[1]


def owned_ids(user) -> tuple[list[str], list[str]]:
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


def candidates(world, alice) -> tuple[Candidates, list[str]]:
    """Return the values to fill URLs with, and which of them are alice's ids."""
    from webapp.catalogue.models import Material, Printer

    uuids, pks = owned_ids(alice)
    report = world["check"].report
    words = sorted(report["figures"])[:3] + ["transmission.s2p", "report.pdf"]
    words += [Printer.objects.order_by("pk").first().slug, Material.objects.order_by("pk").first().slug]
    words += ["zoned"]  # a component kind, for the parametric pages
    return Candidates(uuids=uuids, ints=pks[:2], words=words), uuids + pks


def markers(world) -> list[bytes]:
    """Return byte strings that appear only in alice's data: none may reach anyone else."""
    return [SECRET_NAME.encode(), str(world["check"].public_id).encode(), str(world["design"].public_id).encode()]


class Persona:
    """A signed-in user's browser and API client, signed in again after a sign-out URL."""

    def __init__(self, user, token: str | None) -> None:
        self.user = user
        self.browser = Client()
        self.browser.force_login(user)
        self.api = Client(HTTP_AUTHORIZATION=f"Bearer {token}") if token else self.browser

    def ask(self, method: str, path: str):
        answer = ask(self.api if path.startswith("/api/") else self.browser, method, path)
        if "logout" in path:
            self.browser.force_login(self.user)
        return answer


def ask(client: Client, method: str, path: str):
    response = client.generic(method, path)
    body = b"".join(response.streaming_content) if response.streaming else response.content
    return response.status_code, body, response.get("Location", "")


def lands_on(location: str, client: Client | None = None) -> str:
    """Follow a redirect chain (a page that moved, then the sign-in) and return where it ends."""
    client = client or Client()
    for _ in range(5):
        response = client.get(location)
        if response.status_code != 302:
            return location
        location = response["Location"]
    return location
