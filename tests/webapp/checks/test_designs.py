"""Designs and their revisions: one family, numbered in order, whoever revises which revision."""

from tests.webapp.parts import box_stl
from webapp.checks import presenters, services
from webapp.checks.models import Check


def test_revisions_share_a_family_and_count_up(alice):
    """A revision of any revision takes the family's next number."""
    first = services.design_create(owner=alice, name="a.stl", data=box_stl())
    second = services.design_create(owner=alice, name="a2.stl", data=box_stl(11), revision_of=first, note="wider")
    third = services.design_create(owner=alice, name="a3.stl", data=box_stl(12), revision_of=first)
    other = services.design_create(owner=alice, name="b.stl", data=box_stl())
    assert (first.revision, second.revision, third.revision) == (1, 2, 3)
    assert first.family == second.family == third.family != other.family
    assert second.note == "wider" and second.revision_of == first


def test_the_stage_list_follows_the_check():
    """Stages before the current one are done, the current one is marked, the rest wait."""
    check = Check(status="running", stage="rules")
    states = [s["state"] for s in presenters.stage_rows(check)]
    assert states == ["done", "done", "current"] + ["waiting"] * 5
    assert all(s["state"] == "done" for s in presenters.stage_rows(Check(status="done", stage="done")))
    assert presenters.failure_advice("time_limit").startswith("Try a coarser printer profile")
    assert presenters.failure_advice("not_a_mesh") == presenters.DEFAULT_ADVICE


def test_two_files_of_one_name_can_be_told_apart(alice_client, alice, seeded):
    """Two uploads named alike with different content show different content fingerprints (SHA-256, FIPS 180-4)."""
    import hashlib

    from tests.webapp.parts import finned_plate_stl
    from webapp.checks import services

    first, second = finned_plate_stl(), finned_plate_stl()[:-50] + b"\0" * 50
    for data in (first, second):
        services.design_create(owner=alice, name="lens.stl", data=data, units="mm")
    page = alice_client.get("/designs/").content.decode()
    for data in (first, second):
        assert f"content {hashlib.sha256(data).hexdigest()[:8]}" in page
