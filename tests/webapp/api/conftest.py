"""An API client per persona that checks every answer against the served OpenAPI description.

Every call made through ``Api`` asserts that its status is documented for that operation and that
a JSON body validates against the documented schema, so the contract tests keep the description true.
"""

import json
import re
from unittest import mock

import pytest
from django.test import Client
from django.urls import resolve
from openapi_schema_validator import OAS31Validator

from services import catalogue
from services.intake import read_part
from services.report import build_report
from services.settings import CheckSettings, OpticsSettings
from tests.webapp.parts import box_stl, finned_plate_stl
from webapp.api.services import api_token_create
from webapp.checks import services as checks
from webapp.checks.models import Check

API = "/api/v1/"


@pytest.fixture(autouse=True)
def fast_passwords(settings):
    """Hash the personas' passwords cheaply: the API tests are not about password hashing."""
    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]


@pytest.fixture(scope="session")
def spec(django_db_setup, django_db_blocker):
    """Return the OpenAPI description as the site serves it."""
    with django_db_blocker.unblock():
        return json.loads(Client().get(API + "openapi.json").content)


def operation_of(spec: dict, route: str, method: str) -> dict:
    """Return the description of the operation a Django route and method lead to."""
    path = "/" + re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", route)
    assert path in spec["paths"], f"{path} is not in the OpenAPI description"
    assert method.lower() in spec["paths"][path], f"{method} {path} is not in the OpenAPI description"
    return spec["paths"][path][method.lower()]


def assert_conforms(spec: dict, response) -> None:
    """Assert the answer is one the description documents, with a body of the documented shape."""
    match = resolve(response.request["PATH_INFO"])
    if match.url_name is None or match.namespace != "api":
        assert response.status_code == 404 and set(response.json()) == {"code", "message"}
        return
    documented = operation_of(spec, match.route, response.request["REQUEST_METHOD"])["responses"]
    assert str(response.status_code) in documented, f"{match.route} answered an undocumented {response.status_code}"
    content = documented[str(response.status_code)].get("content", {})
    if response.status_code == 204:
        assert not response.content
    elif response["Content-Type"].startswith("application/json"):
        schema = content["application/json"]["schema"]
        OAS31Validator({**schema, "components": spec["components"]}).validate(response.json())
    else:
        assert response["Content-Type"].split(";")[0] in content


class Api:
    """Call the API as one persona (by token, or anonymously) and check each answer's shape."""

    def __init__(self, spec: dict, token: str | None = None, client: Client | None = None) -> None:
        self.spec, self.token, self.client = spec, token, client or Client()

    def _headers(self, extra=None) -> dict:
        return {**({"Authorization": f"Bearer {self.token}"} if self.token else {}), **(extra or {})}

    def get(self, path: str, params=None, headers=None):
        return self._checked(self.client.get(API + path, params or {}, headers=self._headers(headers)))

    def post(self, path: str, payload=None, headers=None):
        return self.send("post", path, payload, headers)

    def put(self, path: str, payload=None, headers=None):
        return self.send("put", path, payload, headers)

    def delete(self, path: str, headers=None):
        return self._checked(self.client.delete(API + path, headers=self._headers(headers)))

    def send(self, method: str, path: str, payload=None, headers=None):
        """Send a JSON body with any method (GET sends none)."""
        if method == "get":
            return self.get(path, headers=headers)
        call = getattr(self.client, method)
        return self._checked(call(API + path, json.dumps(payload or {}), content_type="application/json",
                                  headers=self._headers(headers)))

    def upload(self, data: bytes, name: str = "box.stl", **fields):
        from django.core.files.uploadedfile import SimpleUploadedFile

        return self._checked(self.client.post(API + "designs", {"file": SimpleUploadedFile(name, data), **fields},
                                              headers=self._headers()))

    def _checked(self, response):
        assert_conforms(self.spec, response)
        return response


@pytest.fixture
def as_alice(spec, alice):
    return Api(spec, api_token_create(user=alice, name="alice's script")[1])


@pytest.fixture
def as_bob(spec, bob):
    return Api(spec, api_token_create(user=bob, name="bob's script")[1])


@pytest.fixture
def as_charlie(spec, charlie):
    return Api(spec, api_token_create(user=charlie, name="charlie's script")[1])


@pytest.fixture
def anonymous(spec, db):
    return Api(spec)


@pytest.fixture
def no_worker():
    """Record the checks that would be sent to a worker, without a broker."""
    with mock.patch("webapp.checks.queue.send_run_check") as delay:
        yield delay


@pytest.fixture
def alice_design(as_alice):
    return as_alice.upload(box_stl(), units="mm").json()


def check_request(design_id: str, **extra) -> dict:
    return {"design": design_id, "printer": "bay1-lcd-resin", "material": "standard-resin", "quantities": [1, 5],
            "optics": {"freqs_ghz": [140.0]}, **extra}


@pytest.fixture(scope="session")
def plate_report():
    """A real report of a plate with a 0.1 mm fin on the 50 um printer (blockers by construction)."""
    part = read_part(finned_plate_stl(), name="plate.stl", units="mm")
    settings = CheckSettings(quantities=(1, 5), optics=OpticsSettings(freqs_ghz=(140.0,)))
    return build_report(part=part, printer=catalogue.printer("bay1-lcd-resin"),
                        material=catalogue.material("standard-resin"), settings=settings)


@pytest.fixture
def alice_check(as_alice, alice_design, no_worker):
    return as_alice.post("checks", check_request(alice_design["id"])).json()


@pytest.fixture
def done_check(alice_check, plate_report):
    checks.report_store(check=Check.objects.get(public_id=alice_check["id"]), report=plate_report)
    return alice_check
