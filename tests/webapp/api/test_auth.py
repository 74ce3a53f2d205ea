"""Who may call: personal tokens in the Authorization header, the site's session with CSRF, nobody else."""

import io
import re
import uuid
from datetime import timedelta

import pytest
from django.core.management import CommandError, call_command
from django.test import Client
from django.urls import reverse
from django.utils import timezone

from tests.webapp.api.conftest import API, Api
from webapp.api import tokens
from webapp.api.models import ApiToken
from webapp.api.services import api_token_authenticate, api_token_create, api_token_revoke

FILL = {"design_id": str(uuid.uuid4()), "check_id": str(uuid.uuid4()), "log_id": str(uuid.uuid4()),
        "slug": "bay1-lcd-resin", "name": "x.png"}


def _operations(spec):
    for path, item in spec["paths"].items():
        for method in item:
            yield method, re.sub(r"\{(\w+)\}", lambda m: FILL[m.group(1)], path).removeprefix(API)


def test_anonymous_gets_401_from_every_operation(spec, anonymous):
    """Every operation in the description answers an anonymous caller 401 in the API's error shape."""
    operations = list(_operations(spec))
    assert len(operations) >= 28
    for method, path in operations:
        response = anonymous.delete(path) if method == "delete" else anonymous.send(method, path)
        assert response.status_code == 401, (method, path)
        assert response.json()["code"] == "not_authenticated" and response["WWW-Authenticate"] == "Bearer"


def test_a_token_authenticates_and_notes_its_use(as_alice, alice):
    """A token in the Authorization header is its owner; its last use is recorded."""
    body = as_alice.get("me").json()
    assert body == {"username": "alice", "lab_manager": False}
    assert ApiToken.objects.get(user=alice).last_used_at is not None


@pytest.mark.parametrize("header", ["Bearer pw_not-a-real-token-000000000000", "Token {t}", "Bearer {t}x", "{t}"])
def test_a_wrong_token_gets_401(spec, alice, header):
    """A made-up token, the wrong scheme, a changed character or a bare token all answer 401."""
    _, raw = api_token_create(user=alice, name="ci")
    response = Api(spec).get("me", headers={"Authorization": header.format(t=raw)})
    assert response.status_code == 401


def test_a_token_is_never_read_from_the_address_or_a_cookie(spec, alice):
    """A token in the query string or in a cookie is ignored: 401."""
    _, raw = api_token_create(user=alice, name="ci")
    assert Api(spec).get("me", {"token": raw, "access_token": raw}).status_code == 401
    client = Client()
    client.cookies["token"] = raw
    assert Api(spec, client=client).get("me").status_code == 401


def test_a_revoked_token_or_an_inactive_user_gets_401(spec, alice):
    """Revoking the token, or deactivating its owner, shuts it out."""
    token, raw = api_token_create(user=alice, name="ci")
    assert Api(spec, raw).get("me").status_code == 200
    api_token_revoke(token=token)
    assert Api(spec, raw).get("me").status_code == 401
    _, other = api_token_create(user=alice, name="ci 2")
    alice.is_active = False
    alice.save()
    assert Api(spec, other).get("me").status_code == 401


def test_only_a_digest_and_a_prefix_are_stored(alice):
    """The row keeps the sha256 of the token and its first characters, never the token."""
    token, raw = api_token_create(user=alice, name="ci")
    assert raw.startswith("pw_") and len(raw) >= 40 and token.prefix == raw[:11]
    assert raw not in {token.digest, token.prefix, token.name} and token.digest == tokens.digest_of(raw)
    # FIPS 180-4 example (NIST CSRC, "SHA256.pdf"): sha256("abc").
    assert tokens.digest_of("abc") == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    changed = raw[:-1] + ("B" if raw.endswith("A") else "A")
    assert tokens.same_digest(token.digest, raw) and not tokens.same_digest(token.digest, changed)


def test_last_use_is_written_at_most_once_a_minute(alice):
    """A call within a minute of the last noted use writes nothing; a later one moves it on."""
    token, raw = api_token_create(user=alice, name="ci")
    t0 = timezone.now()
    for offset_s, expected in ((0, t0), (30, t0), (61, t0 + timedelta(seconds=61))):
        assert api_token_authenticate(raw=raw, now=t0 + timedelta(seconds=offset_s)) == alice
        token.refresh_from_db()
        assert token.last_used_at == expected


def test_a_session_call_needs_the_csrf_token(spec, alice, alice_design):
    """The site's own JSON calls work by session; an unsafe one without X-CSRFToken answers 403."""
    client = Client(enforce_csrf_checks=True)
    client.force_login(alice)
    api = Api(spec, client=client)
    assert api.get("me").json()["username"] == "alice"
    refused = api.upload(b"solid x\nendsolid x\n", name="x.stl")
    assert refused.status_code == 403 and refused.json()["code"] == "csrf_failed"
    client.get(reverse("api_tokens"))  # the page sets the CSRF cookie
    allowed = api.post("designs/parametric", {"kind": "window", "printer": "none", "material": "none"},
                       headers={"X-CSRFToken": client.cookies["csrftoken"].value})
    assert allowed.status_code == 400 and allowed.json()["code"] == "unknown_printer"


def test_the_account_page_makes_shows_once_and_revokes(alice_client, alice):
    """A token made on the page is shown on that answer only; revoking it shuts it out."""
    made = alice_client.post(reverse("api_tokens"), {"name": "lab CI"})
    raw = re.search(r'<code id="new-token">(pw_[\w-]+)</code>', made.content.decode()).group(1)
    token = ApiToken.objects.get(user=alice)
    assert token.name == "lab CI" and token.digest == tokens.digest_of(raw)
    listing = alice_client.get(reverse("api_tokens")).content.decode()
    assert raw not in listing and token.prefix in listing and "no-store" in made["Cache-Control"]
    alice_client.post(reverse("api_tokens"), {"token": str(token.public_id)})
    assert api_token_authenticate(raw=raw) is None


def test_the_account_page_refuses_a_nameless_token_and_strangers(alice_client, charlie_client, alice, client):
    """A token needs a name; charlie cannot revoke alice's; an anonymous visitor is sent to sign in."""
    assert alice_client.post(reverse("api_tokens"), {"name": ""}).status_code == 400
    token, raw = api_token_create(user=alice, name="ci")
    assert charlie_client.post(reverse("api_tokens"), {"token": str(token.public_id)}).status_code == 404
    assert api_token_authenticate(raw=raw) == alice
    assert client.get(reverse("api_tokens")).status_code == 302


def test_the_command_prints_a_working_token(spec, alice):
    """``manage.py create_api_token alice`` prints a token the API accepts; an unknown user is an error."""
    out = io.StringIO()
    call_command("create_api_token", "alice", "--name", "bench", stdout=out)
    raw = out.getvalue().strip()
    assert Api(spec, raw).get("me").json()["username"] == "alice"
    assert ApiToken.objects.get(user=alice).name == "bench"
    with pytest.raises(CommandError, match="no user"):
        call_command("create_api_token", "nobody", stdout=io.StringIO())
