"""Shared fixtures: a private var folder per test session, and the three personas.

alice owns things, bob is a lab manager on the same site, charlie is a stranger who must see
nothing of alice's (404, not 403).
"""

import pytest

# Tests that start workers, servers or a browser, or stop and restart services, or time how long a worker takes:
# `make test` runs them after the parallel part, one at a time, so another test's load never decides them.
SERIAL = ("tests/reliability/", "tests/webapp/e2e/", "tests/webapp/test_worker_e2e.py",
          "tests/webapp/api/test_batch_live.py", "tests/webapp/checks/test_serve.py", "tests/security/test_deploy.py")


def pytest_collection_modifyitems(config, items):
    for item in items:
        if item.nodeid.startswith(SERIAL):
            item.add_marker(pytest.mark.serial)


@pytest.fixture
def alice(db, django_user_model):
    return django_user_model.objects.create_user("alice", password="alice-password-1")


@pytest.fixture
def bob(db, django_user_model):
    from django.contrib.auth.models import Group

    from webapp.accounts.roles import LAB_MANAGER_GROUP

    user = django_user_model.objects.create_user("bob", password="bob-password-12")
    user.groups.add(Group.objects.get_or_create(name=LAB_MANAGER_GROUP)[0])
    return user


@pytest.fixture
def charlie(db, django_user_model):
    return django_user_model.objects.create_user("charlie", password="charlie-password")


def _client_for(user):
    from django.test import Client

    client = Client()
    client.force_login(user)
    return client


@pytest.fixture
def alice_client(alice):
    return _client_for(alice)


@pytest.fixture
def bob_client(bob):
    return _client_for(bob)


@pytest.fixture
def charlie_client(charlie):
    return _client_for(charlie)


@pytest.fixture
def seeded(db):
    """Seed the starter printers and materials."""
    from webapp.catalogue.services import catalogue_seed

    catalogue_seed()
