"""Every edit is a version: the old data stays, old checks keep their snapshot, the report says what changed."""

import pytest
from django.urls import reverse

from services import catalogue as starter
from tests.webapp.catalogue.conftest import estimated_check, posted, run_real_check
from webapp.catalogue import services
from webapp.catalogue.forms import MaterialForm, PrinterForm
from webapp.catalogue.models import Printer, PrinterVersion
from webapp.catalogue.selectors import catalogue_changed_since, version_history
from webapp.checks.forms import CheckOptionsForm


def _edit_printer(client, printer, **changes):
    body = posted(PrinterForm(base=printer.data, creating=False), **changes)
    return client.post(reverse("catalogue:printer_edit", args=[printer.slug]), body)


def test_an_edit_bumps_the_version_and_keeps_the_old_snapshot(bob_client, bob, alice, bay1, resin):
    """Raising the exposure makes version 2; version 1's data and alice's earlier check are untouched."""
    check = estimated_check(alice, bay1, resin, print_time_s=700)
    before = dict(check.printer_snapshot)
    response = _edit_printer(bob_client, bay1, time_model__masked_vat__exposure_s="3.0", note="new resin cures slower")
    assert response.status_code == 302, response.content.decode()[:3000]
    bay1.refresh_from_db()
    v1, v2 = PrinterVersion.objects.get(entry=bay1, version=1), PrinterVersion.objects.get(entry=bay1, version=2)
    assert bay1.version == 2 and bay1.data["time_model"]["exposure_s"] == 3.0 and bay1.data["version"] == 2
    assert v1.data["time_model"]["exposure_s"] == 2.5 and v2.data == bay1.data
    assert v2.created_by == bob and v2.note == "new resin cures slower"
    check.refresh_from_db()
    assert check.printer_snapshot == before and check.printer.snapshot().time_model["exposure_s"] == 3.0


def test_the_history_shows_what_changed(bob_client, bay1):
    """The detail page lists version 2 with the changed value, old and new."""
    _edit_printer(bob_client, bay1, rules__min_feature__supported_mm="0.2")
    history = version_history(Printer.objects.get(pk=bay1.pk))
    assert [row["version"].version for row in history] == [2, 1]
    assert history[0]["changes"] == [("rules.min_feature.supported_mm", 0.15, 0.2)]
    page = bob_client.get(reverse("catalogue:printer_detail", args=[bay1.slug])).content.decode()
    assert "Minimum feature – Supported feature, mm" in page and "0.15 → 0.2" in page


def test_the_history_names_rf_rows_by_frequency(bob, resin):
    """A new RF row shows as that row added, not as every later row changed."""
    row = {"freq_ghz": 300.0, "eps_r": 2.8, "tan_delta": 0.05, "source": "our measurement"}
    services.material_update(user=bob, material=resin, data={**resin.data, "rf": [*resin.data["rf"], row]})
    changes = version_history(resin.__class__.objects.get(pk=resin.pk))[0]["changes"]
    assert changes == [("rf.300 GHz.eps_r", None, 2.8), ("rf.300 GHz.source", None, "our measurement"),
                       ("rf.300 GHz.tan_delta", None, 0.05)]


def test_saving_an_unchanged_form_makes_no_version(bob_client, bay1):
    """Saving what is already there keeps the version and says so."""
    response = _edit_printer(bob_client, bay1)
    assert response.status_code == 302
    bay1.refresh_from_db()
    assert bay1.version == 1 and PrinterVersion.objects.filter(entry=bay1).count() == 1
    assert "Nothing changed" in bob_client.get(response["Location"]).content.decode()


def test_a_stale_edit_is_refused(bob_client, bob, bay1):
    """Two lab managers edit at once: the later save, made from version 1, is refused instead of overwriting."""
    form_body = posted(PrinterForm(base=bay1.data, creating=False), pixel_mm="0.05", notes="mine")
    services.printer_update(user=bob, printer=bay1, data={**bay1.data, "notes": "theirs"})
    response = bob_client.post(reverse("catalogue:printer_edit", args=[bay1.slug]), form_body)
    assert response.status_code == 400 and "Someone saved version 2" in response.content.decode()
    bay1.refresh_from_db()
    assert bay1.data["notes"] == "theirs"


def test_the_report_says_when_the_profile_changed(bob, alice, bay1, resin):
    """catalogue_changed_since gives the report page a sentence per changed entry."""
    check = estimated_check(alice, bay1, resin, print_time_s=700)
    assert catalogue_changed_since(check) == []
    services.printer_update(user=bob, printer=bay1, data={**bay1.data, "notes": "a"})
    services.printer_update(user=bob, printer=Printer.objects.get(pk=bay1.pk), data={**bay1.data, "notes": "b"})
    services.material_update(user=bob, material=resin, data={**resin.data, "price": 50.0})
    check.refresh_from_db()
    assert catalogue_changed_since(check) == [
        "Bay 1 - LCD-masked resin is now at version 3; this report used version 1.",
        "Standard methacrylate resin is now at version 2; this report used version 1."]


def test_create_from_a_copy(bob_client, bay1):
    """A new profile copied from Bay 1 starts at version 1 and is offered on the upload form."""
    body = posted(PrinterForm(base={**bay1.data, "slug": "", "version": None}, creating=True),
                  slug="bay4-lcd-resin", name="Bay 4 - second LCD resin")
    response = bob_client.post(reverse("catalogue:printer_create") + "?from=bay1-lcd-resin", body)
    assert response.status_code == 302, response.content.decode()[:3000]
    bay4 = Printer.objects.get(slug="bay4-lcd-resin")
    assert bay4.version == 1 and bay4.versions.get().data == bay4.data
    assert bay4.snapshot().rules == bay1.snapshot().rules
    assert "bay4-lcd-resin" in [p.slug for p in CheckOptionsForm().fields["printer"].queryset]


def test_create_a_material_with_its_rf_table(bob_client, resin):
    """A new material keeps its RF rows sorted by frequency, each with its source."""
    form = MaterialForm(base={}, creating=True)
    body = posted(form, slug="clear-v2", name="Clear resin v2", kind="photopolymer", processes="vat_photopolymerisation",
                  density_g_cm3="1.12", price="60", price_unit="l", currency="EUR", waste_factor="0.1",
                  rf__0__freq_ghz="300", rf__0__eps_r="2.8", rf__0__tan_delta="0.04", rf__0__source="our 2026 measurement",
                  rf__1__freq_ghz="100", rf__1__eps_r="2.75", rf__1__tan_delta="0.03", rf__1__source="datasheet")
    response = bob_client.post(reverse("catalogue:material_create"), body)
    assert response.status_code == 302, response.content.decode()[:3000]
    clear = resin.__class__.objects.get(slug="clear-v2")
    assert [p.freq_ghz for p in clear.snapshot().rf] == [100.0, 300.0]
    assert clear.snapshot().rf[1].source == "our 2026 measurement"


def test_retire_hides_from_upload_but_old_reports_render(bob_client, alice_client, alice, bay1, resin):
    """A retired profile leaves the upload form; alice's finished report still renders and says it was retired."""
    check = run_real_check(alice, bay1, resin)
    response = bob_client.post(reverse("catalogue:printer_retire", args=[bay1.slug]), {"action": "retire"})
    assert response.status_code == 302
    assert "bay1-lcd-resin" not in [p.slug for p in CheckOptionsForm().fields["printer"].queryset]
    page = alice_client.get(reverse("check", args=[check.public_id]))
    assert page.status_code == 200 and "verdict-banner" in page.content.decode()
    check.refresh_from_db()
    assert "Bay 1 - LCD-masked resin has been retired: new checks cannot choose it." in catalogue_changed_since(check)
    assert "retired" in bob_client.get(reverse("catalogue:printer_list")).content.decode()
    bob_client.post(reverse("catalogue:printer_retire", args=[bay1.slug]), {"action": "reinstate"})
    assert "bay1-lcd-resin" in [p.slug for p in CheckOptionsForm().fields["printer"].queryset]


def test_an_entry_from_before_versioning_keeps_its_data(bob, seeded):
    """An entry with no version record gets its current data recorded as its version before the edit."""
    p = Printer.objects.get(slug="bay2-filament")
    p.versions.all().delete()
    services.printer_update(user=bob, printer=p, data={**p.data, "notes": "edited"})
    old = p.versions.get(version=1)
    assert old.data["notes"] != "edited" and p.versions.get(version=2).data["notes"] == "edited"


@pytest.mark.parametrize("kind,slug", [("printer", p.slug) for p in starter.printers()] +
                         [("material", m.slug) for m in starter.materials()])
def test_the_seeded_form_round_trips(bob_client, seeded, kind, slug):
    """Every starter entry's edit form, posted as shown, saves cleanly without a new version."""
    from webapp.catalogue.views import KINDS

    entry = KINDS[kind].get(slug=slug)
    body = posted(KINDS[kind].form(base=entry.data, creating=False))
    response = bob_client.post(reverse(f"catalogue:{kind}_edit", args=[slug]), body)
    assert response.status_code == 302, response.content.decode()[:3000]
    entry.refresh_from_db()
    assert entry.version == 1


def test_seeding_updates_never_edited_starters_and_leaves_edited_ones(bob, resin, seeded):
    """A starter still at its first version takes the new starter data as version 2; a lab's edit is kept."""
    from webapp.catalogue.models import Material

    old = {**resin.data, "band_ghz": None, "rf": [resin.data["rf"][-1]]}
    Material.objects.filter(pk=resin.pk).update(data=old)
    resin.versions.filter(version=1).update(data=old)
    pla = Material.objects.get(slug="pla")
    services.material_update(user=bob, material=pla, data={**pla.data, "price": 30.0}, note="new supplier")
    services.catalogue_seed()
    resin.refresh_from_db()
    pla.refresh_from_db()
    assert resin.version == 2 and resin.data["band_ghz"] == [75.0, 110.0] and len(resin.data["rf"]) == 3
    assert pla.version == 2 and pla.data["price"] == 30.0
    services.catalogue_seed()  # a second run changes nothing
    resin.refresh_from_db()
    assert resin.version == 2


def test_seeding_again_makes_no_version(seeded):
    """Re-running the seed over an up-to-date catalogue leaves every entry at version 1."""
    from webapp.catalogue.models import Material, Printer

    services.catalogue_seed()
    assert {e.version for e in [*Printer.objects.all(), *Material.objects.all()]} == {1}
