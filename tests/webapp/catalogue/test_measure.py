"""The lab manager's measure page: .s2p files in, a fit plotted, a new material version with the source out."""

import numpy as np
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from tests.services.optics.test_material_fit import W_BAND, skrf_s2p
from webapp.catalogue.models import MaterialVersion


def _upload(client, resin, files, lab="Tarn Valley lab"):
    body = {"lab": lab, "action": "fit"}
    for i, (name, data, thickness) in enumerate(files, start=1):
        body[f"file_{i}"] = SimpleUploadedFile(name, data)
        body[f"thickness_mm_{i}"] = str(thickness)
    return client.post(reverse("catalogue:material_measure", args=[resin.slug]), body)


def test_a_lab_manager_fits_two_samples_and_saves_a_new_version(bob_client, resin):
    """Two W-band samples of eps 2.9, tan delta 0.025: plot and rows shown; saving makes version 2 with the source."""
    files = [("thin.s2p", skrf_s2p(2.9, 0.025, 2.0, W_BAND, 0.002, 1), 2.0),
             ("thick.s2p", skrf_s2p(2.9, 0.025, 5.0, W_BAND, 0.002, 2), 5.0)]
    page = _upload(bob_client, resin, files)
    assert page.status_code == 200, page.content.decode()[:2000]
    html = page.content.decode()
    assert "data:image/png;base64," in html and "measured by Tarn Valley lab" in html and "Save as version 2" in html
    saved = bob_client.post(reverse("catalogue:material_measure", args=[resin.slug]),
                            {"action": "save", "payload": page.context["payload"]})
    assert saved.status_code == 302
    resin.refresh_from_db()
    assert resin.version == 2
    rf = resin.data["rf"]
    measured = [p for p in rf if "measured by Tarn Valley lab" in p["source"]]
    assert len(measured) == 5 and all("thin.s2p, thick.s2p" in p["source"] for p in measured)
    assert np.allclose([p["eps_r"] for p in measured], 2.9, atol=0.01)
    # The published 1 THz point outside the measured band stays; the W-band points it replaced are gone.
    assert [p["freq_ghz"] for p in rf if p not in measured] == [1000.0]
    assert "measured from thin.s2p, thick.s2p" in MaterialVersion.objects.get(entry=resin, version=2).note


def test_a_bad_file_gets_its_sentence_and_nothing_is_saved(bob_client, resin):
    page = _upload(bob_client, resin, [("notes.s2p", b"not a measurement\n", 2.0)])
    assert page.status_code == 400 and "could not be read as a Touchstone file" in page.content.decode()
    resin.refresh_from_db()
    assert resin.version == 1


def test_an_altered_payload_is_refused(bob_client, resin):
    response = bob_client.post(reverse("catalogue:material_measure", args=[resin.slug]),
                               {"action": "save", "payload": "forged"}, follow=True)
    assert "upload the files again" in response.content.decode()
    resin.refresh_from_db()
    assert resin.version == 1


def test_designers_cannot_measure_but_see_the_rf_plot(alice_client, resin):
    assert alice_client.get(reverse("catalogue:material_measure", args=[resin.slug])).status_code == 403
    png = alice_client.get(reverse("catalogue:material_rf_png", args=[resin.slug]))
    assert png.status_code == 200 and png["Content-Type"] == "image/png" and png.content[:4] == b"\x89PNG"
    page = alice_client.get(reverse("catalogue:material_detail", args=[resin.slug])).content.decode()
    assert reverse("catalogue:material_rf_png", args=[resin.slug]) in page and "Design band: 75-110 GHz" in page


def test_the_measure_page_opens_from_the_material_page(bob_client, resin):
    detail = bob_client.get(reverse("catalogue:material_detail", args=[resin.slug])).content.decode()
    assert reverse("catalogue:material_measure", args=[resin.slug]) in detail
    page = bob_client.get(reverse("catalogue:material_measure", args=[resin.slug]))
    assert page.status_code == 200 and "Sample 1, .s2p file" in page.content.decode()


def test_each_sample_is_one_row_with_its_file_and_its_thickness(bob_client, resin):
    """The page lays a sample's file beside its own thickness (a plain grid put sample 2's file beside sample 1's
    thickness), and the symbols in the RF table's head are not upper-cased (tan δ is not tan Δ)."""
    import re

    page = bob_client.get(reverse("catalogue:material_measure", args=[resin.slug])).content.decode()
    rows = re.findall(r'<div class="sample-row">(.*?)</div>\s*</div>', page, flags=re.S)
    assert len(rows) == 4
    for i, row in enumerate(rows, start=1):
        assert f'name="file_{i}"' in row and f'name="thickness_mm_{i}"' in row
        assert "file_" + str(i + 1) not in row
    detail = bob_client.get(reverse("catalogue:material_detail", args=[resin.slug])).content.decode()
    assert '<th scope="col" class="num symbol">tan δ</th>' in detail
