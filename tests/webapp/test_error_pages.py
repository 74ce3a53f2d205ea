"""Refusals and missing pages answer in the site's own style with a sentence, never a bare status or URL list."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_a_designer_on_a_lab_manager_page_reads_why(alice_client, seeded):
    response = alice_client.get("/catalogue/printers/new/")
    assert response.status_code == 403
    page = response.content.decode()
    assert "This page is not open to your account" in page
    assert "Only a lab manager can change printers, materials and prices." in page
    assert 'href="/static/phasewright/site.css"' in page or "site.css" in page


def test_an_unknown_address_gets_the_sites_page_not_a_url_listing(alice_client):
    response = alice_client.get("/no/such/page/")
    assert response.status_code == 404
    page = response.content.decode()
    assert "Nothing at this address" in page and "<code>/no/such/page/</code>" in page
    assert "URLconf" not in page and "api/v1" not in page


def test_a_missing_report_says_which_thing_is_missing(alice_client):
    response = alice_client.get("/checks/00000000-0000-0000-0000-000000000000/")
    assert response.status_code == 404 and "Nothing at this address" in response.content.decode()


def test_the_embedded_default_runs_with_debug_off():
    """`make run` turns DEBUG off (as production does) with plain HTTP on loopback and a generated key."""
    makefile = (ROOT / "Makefile").read_text()
    assert "PHASEWRIGHT_DEBUG=False" in makefile and "PHASEWRIGHT_SECRET_KEY_FILE=var/secret_key" in makefile
    env = {"PHASEWRIGHT_DEBUG": "False", "PHASEWRIGHT_HTTPS": "False", "PHASEWRIGHT_BEHIND_PROXY": "False",
           "PHASEWRIGHT_SECRET_KEY": "k" * 30 + "abcdefghij" * 3, "DJANGO_SETTINGS_MODULE": "webapp.settings",
           "PATH": "/usr/bin:/bin"}
    code = "import django; django.setup(); from django.conf import settings as s; print(s.DEBUG, s.SECURE_SSL_REDIRECT)"
    out = subprocess.run([sys.executable, "-c", code], env=env, cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert out.split() == ["False", "False"]
