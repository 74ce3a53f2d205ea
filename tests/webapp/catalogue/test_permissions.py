"""Who may do what: everyone signed in reads the catalogue, only a lab manager changes it, and a
stranger sees nothing of alice's print logs (404, not 403)."""

import pytest
from django.urls import reverse

from tests.webapp.catalogue.conftest import estimated_check
from webapp.catalogue import services
from webapp.catalogue.models import PrintLog

READ_PAGES = [("catalogue:printer_list", ()), ("catalogue:material_list", ()), ("catalogue:log_list", ()),
              ("catalogue:printer_detail", ("bay1-lcd-resin",)), ("catalogue:material_detail", ("standard-resin",))]
WRITE_PAGES = [("catalogue:printer_create", ()), ("catalogue:material_create", ()),
               ("catalogue:printer_edit", ("bay1-lcd-resin",)), ("catalogue:material_edit", ("standard-resin",)),
               ("catalogue:printer_retire", ("bay1-lcd-resin",)), ("catalogue:material_retire", ("standard-resin",))]


@pytest.fixture
def alice_log(alice, bay1, resin):
    check = estimated_check(alice, bay1, resin, print_time_s=3600)
    return services.print_log_create(user=alice, check=check, actual_print_time_s=4000, succeeded=True)


@pytest.mark.parametrize("name,args", READ_PAGES)
def test_it_lets_everyone_signed_in_read(alice_client, bob_client, charlie_client, seeded, name, args):
    """Designers read profiles and materials (and their own logs); the lab manager too."""
    for client in (alice_client, bob_client, charlie_client):
        assert client.get(reverse(name, args=args)).status_code == 200


@pytest.mark.parametrize("name,args", READ_PAGES + WRITE_PAGES)
def test_it_requires_login(client, seeded, name, args):
    """An anonymous visitor is sent to the sign-in page from every catalogue page."""
    response = client.get(reverse(name, args=args))
    assert response.status_code == 302 and reverse("login") in response["Location"]


@pytest.mark.parametrize("name,args", WRITE_PAGES)
def test_it_lets_only_a_lab_manager_change_things(alice_client, bob_client, charlie_client, seeded, name, args):
    """Create, edit and retire pages: 200 for bob, 403 for designers on GET and on POST."""
    assert bob_client.get(reverse(name, args=args)).status_code == 200
    for client in (alice_client, charlie_client):
        assert client.get(reverse(name, args=args)).status_code == 403
        assert client.post(reverse(name, args=args), {"action": "retire", "name": "x"}).status_code == 403


def test_a_designer_post_changes_nothing(alice_client, bay1):
    """A designer's forged edit or retire leaves the profile as it was."""
    alice_client.post(reverse("catalogue:printer_retire", args=[bay1.slug]), {"action": "retire"})
    alice_client.post(reverse("catalogue:printer_edit", args=[bay1.slug]), {"name": "hacked", "pixel_mm": "9"})
    bay1.refresh_from_db()
    assert not bay1.retired and bay1.version == 1 and bay1.name == "Bay 1 - LCD-masked resin"


def test_it_hides_edit_buttons_from_designers(alice_client, bob_client, bay1):
    """The detail page offers Edit to the lab manager only."""
    edit = reverse("catalogue:printer_edit", args=[bay1.slug])
    assert edit not in alice_client.get(reverse("catalogue:printer_detail", args=[bay1.slug])).content.decode()
    assert edit in bob_client.get(reverse("catalogue:printer_detail", args=[bay1.slug])).content.decode()


def test_an_unknown_profile_is_404(bob_client, seeded):
    """A slug that does not exist is a 404, also for the lab manager."""
    assert bob_client.get(reverse("catalogue:printer_detail", args=["no-such"])).status_code == 404
    assert bob_client.get(reverse("catalogue:material_edit", args=["no-such"])).status_code == 404


def test_the_navigation_leads_to_the_catalogue(bob_client, seeded):
    """The lab manager's navigation links to the printer pages, no longer to the admin."""
    page = bob_client.get(reverse("designs")).content.decode()
    assert f'href="{reverse("catalogue:printer_list")}"' in page and reverse("admin:index") not in page


def test_the_log_form_is_the_owners_and_the_lab_managers(alice_client, bob_client, charlie_client, alice, bay1, resin):
    """Alice and bob may log a print of alice's check; charlie gets a 404 and logs nothing."""
    check = estimated_check(alice, bay1, resin, print_time_s=3600)
    url = reverse("catalogue:log_create", args=[check.public_id])
    assert alice_client.get(url).status_code == 200 and bob_client.get(url).status_code == 200
    assert charlie_client.get(url).status_code == 404
    assert charlie_client.post(url, {"copies": 1, "actual_print_time": "1:00", "outcome": "ok"}).status_code == 404
    assert not PrintLog.objects.exists()


def test_charlie_sees_none_of_alices_logs(alice_client, bob_client, charlie_client, alice_log):
    """Alice and bob see alice's log on the list; charlie sees neither it nor her check."""
    name = alice_log.logged_check.design.name
    assert name in alice_client.get(reverse("catalogue:log_list")).content.decode()
    assert name in bob_client.get(reverse("catalogue:log_list")).content.decode()
    page = charlie_client.get(reverse("catalogue:log_list")).content.decode()
    assert name not in page and str(alice_log.public_id) not in page


def test_charlie_cannot_delete_alices_log(charlie_client, alice_client, alice_log):
    """Charlie's delete is a 404 and the log stays; alice, who owns the check, may delete it."""
    url = reverse("catalogue:log_delete", args=[alice_log.public_id])
    assert charlie_client.post(url).status_code == 404
    assert PrintLog.objects.filter(pk=alice_log.pk).exists()
    assert alice_client.post(url).status_code == 302
    assert not PrintLog.objects.filter(pk=alice_log.pk).exists()


def test_delete_needs_a_post(alice_client, alice_log):
    """A GET (a link followed by a crawler) never deletes a log."""
    assert alice_client.get(reverse("catalogue:log_delete", args=[alice_log.public_id])).status_code == 405
    assert PrintLog.objects.filter(pk=alice_log.pk).exists()

