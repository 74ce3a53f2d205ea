"""API tokens are stored hashed: the database holds a SHA-256 digest and a display prefix, never the token."""

import hashlib
import importlib.util

import pytest
from django.test import Client

pytestmark = [pytest.mark.django_db,
              pytest.mark.skipif(importlib.util.find_spec("webapp.api") is None, reason="the API app is not there yet")]


def test_a_token_is_kept_as_its_sha256_only(alice):
    """No field of the token's row holds the token; the digest is hashlib's sha256 of it; it still signs in."""
    from webapp.api.models import ApiToken
    from webapp.api.services import api_token_create

    row, raw = api_token_create(user=alice, name="ci")
    stored = ApiToken.objects.filter(pk=row.pk).values().get()
    assert raw not in " ".join(str(v) for v in stored.values())
    assert stored["digest"] == hashlib.sha256(raw.encode()).hexdigest()  # Python's hashlib, not our helper
    assert len(stored["prefix"]) < len(raw) // 2
    assert Client(HTTP_AUTHORIZATION=f"Bearer {raw}").get("/api/v1/me").status_code == 200
    wrong = raw[:-1] + ("a" if raw[-1] != "a" else "b")
    assert Client(HTTP_AUTHORIZATION=f"Bearer {wrong}").get("/api/v1/me").status_code == 401
