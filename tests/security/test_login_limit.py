"""Sign-in attempts are limited per account and per address, in the shared cache."""

import pytest
from django.core.cache import cache
from django.test import Client, RequestFactory
from django.urls import reverse

from webapp.accounts.ratelimit import LoginThrottle, client_address

pytestmark = pytest.mark.django_db


@pytest.fixture(autouse=True)
def fresh_counters(settings):
    # A fast hasher: these tests sign in dozens of times, and what they test is the counting.
    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]
    cache.clear()
    yield
    cache.clear()


def _sign_in(username: str, password: str, address: str = "203.0.113.7"):
    client = Client(REMOTE_ADDR=address)
    response = client.post(reverse("login"), {"username": username, "password": password})
    return response, client


def test_five_failures_block_the_account_even_with_the_right_password(alice, settings):
    """After PHASEWRIGHT_LOGIN_FAILURES_PER_USER failures, the right password gets 429 and a sentence."""
    for _ in range(settings.PHASEWRIGHT_LOGIN_FAILURES_PER_USER):
        response, _ = _sign_in("alice", "wrong-password")
        assert response.status_code == 200 and "do not match" in response.content.decode()
    response, client = _sign_in("ALICE ", "alice-password-1")  # case and spaces do not open a second counter
    response, client = _sign_in("alice", "alice-password-1")
    assert response.status_code == 429
    assert "Too many failed sign-ins" in response.content.decode() and "15 minutes" in response.content.decode()
    assert client.get(reverse("designs")).status_code == 302  # not signed in


def test_a_blocked_account_leaves_other_accounts_alone(alice, bob, settings):
    """Bob signs in from the same address while alice's account is blocked."""
    for _ in range(settings.PHASEWRIGHT_LOGIN_FAILURES_PER_USER):
        _sign_in("alice", "wrong-password")
    response, _ = _sign_in("bob", "bob-password-12")
    assert response.status_code == 302


def test_a_successful_sign_in_clears_the_accounts_failures(alice, settings):
    """Failures short of the limit are forgotten once the right password is given."""
    for _ in range(settings.PHASEWRIGHT_LOGIN_FAILURES_PER_USER - 1):
        _sign_in("alice", "wrong-password")
    assert _sign_in("alice", "alice-password-1")[0].status_code == 302
    for _ in range(settings.PHASEWRIGHT_LOGIN_FAILURES_PER_USER - 1):
        _sign_in("alice", "wrong-password")
    assert _sign_in("alice", "alice-password-1")[0].status_code == 302


def test_one_address_guessing_many_accounts_is_blocked(alice, settings):
    """Twenty failures from one address over twenty names block that address, for alice too; others pass."""
    for i in range(settings.PHASEWRIGHT_LOGIN_FAILURES_PER_ADDRESS):
        _sign_in(f"guess-{i}", "wrong-password", address="198.51.100.9")
    assert _sign_in("alice", "alice-password-1", address="198.51.100.9")[0].status_code == 429
    assert _sign_in("alice", "alice-password-1", address="192.0.2.1")[0].status_code == 302


def test_behind_the_proxy_the_address_is_the_one_nginx_appended(settings):
    """A client cannot pick its own address: only the last X-Forwarded-For entry (nginx's) counts."""
    request = RequestFactory().post("/login/", REMOTE_ADDR="127.0.0.1", HTTP_X_FORWARDED_FOR="1.2.3.4, 203.0.113.7")
    settings.BEHIND_PROXY = True
    assert client_address(request) == "203.0.113.7"
    settings.BEHIND_PROXY = False
    assert client_address(request) == "127.0.0.1"


def test_the_throttle_counts_in_the_cache_it_is_given():
    """The strategy object works on any Django cache; its window and limits come in as arguments."""
    from django.core.cache.backends.locmem import LocMemCache

    throttle = LoginThrottle(cache=LocMemCache("throttle-test", {}), window_s=60, per_user=2, per_address=3)
    throttle.failed(username="a", address="x")
    assert not throttle.blocked(username="a", address="x")
    throttle.failed(username="a", address="x")
    assert throttle.blocked(username="a", address="y") and not throttle.blocked(username="b", address="y")
    throttle.failed(username="b", address="x")
    assert throttle.blocked(username="c", address="x")


@pytest.mark.parametrize("look_alike", ["\uff41\uff4c\uff49\uff43\uff45",           # full-width letters
                                        "\U0001d41a\U0001d425\U0001d422\U0001d41c\U0001d41e",  # mathematical bold
                                        "\u00aalice",                             # feminine ordinal mark
                                        "ALICE"])                                 # case
def test_look_alike_names_count_against_the_same_account(alice, settings, look_alike):
    """The sign-in form reads look-alikes as 'alice' (NFKC, Unicode TR15), so their failures count for alice.

    Reference: unicodedata.normalize("NFKC", ...) from the Python standard library maps each of
    these to plain letters, as Django's UsernameField does before the password is checked.
    """
    import unicodedata

    assert unicodedata.normalize("NFKC", look_alike).casefold() == "alice"
    _sign_in("alice", "wrong-password")
    for _ in range(settings.PHASEWRIGHT_LOGIN_FAILURES_PER_USER - 1):
        response, _ = _sign_in(look_alike, "wrong-password")
        assert response.status_code == 200
    response, _ = _sign_in(look_alike, "alice-password-1")
    assert response.status_code == 429
    assert _sign_in("alice", "alice-password-1")[0].status_code == 429
