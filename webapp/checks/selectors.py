"""Read side: every query starts from the user's own objects, so a stranger gets a 404."""

from django.db.models import Prefetch
from django.db.models.fields.json import KT
from django.shortcuts import get_object_or_404

from webapp.checks.models import Check, Design


def design_list_for(*, user):
    return Design.objects.filter(owner=user)


def design_get_for(*, user, public_id) -> Design:
    return get_object_or_404(design_list_for(user=user), public_id=public_id)


def check_list_for(*, user):
    return Check.objects.filter(owner=user).select_related("design", "printer", "material")


def check_get_for(*, user, public_id) -> Check:
    return get_object_or_404(check_list_for(user=user), public_id=public_id)


def check_list_active_for(*, user):
    return check_list_for(user=user).filter(status__in=Check.ACTIVE)


def family_list_for(*, user) -> list[dict]:
    """Return the user's designs grouped by family, newest activity first: latest revision and its checks."""
    # The reports stay in the database: the list needs only their cost and requirements answer, read by key.
    checks = Check.objects.defer("report").annotate(cost_one=KT("report__estimate__cost__total"),
                                                    currency=KT("report__estimate__cost__currency"),
                                                    meets=KT("report__meets_requirements"))
    designs = list(design_list_for(user=user).order_by("family", "-revision").prefetch_related(Prefetch("checks", checks)))
    families: dict = {}
    for d in designs:
        families.setdefault(d.family, []).append(d)
    rows = [{"latest": revs[0], "revisions": len(revs), "checks": list(revs[0].checks.all())} for revs in families.values()]
    return sorted(rows, key=lambda r: r["latest"].created_at, reverse=True)


def design_revisions(*, design: Design):
    """Return every revision of the design's family, newest first (all the same owner)."""
    return Design.objects.filter(owner=design.owner, family=design.family).order_by("-revision")


def checks_get_for(*, user, public_ids) -> list[Check]:
    """Return the user's finished checks with these ids, in the order given; 404 if any is not theirs or not done."""
    from django.http import Http404

    found = {str(c.public_id): c for c in check_list_for(user=user).filter(public_id__in=public_ids, status=Check.DONE)}
    if len(found) != len(set(public_ids)):
        raise Http404("No such finished check.")
    return [found[str(p)] for p in public_ids]


def previous_revision_check(*, check: Check) -> Check | None:
    """Return the finished check of the previous revision on the same printer and material, if any."""
    parent = Design.objects.filter(family=check.design.family, owner=check.owner,
                                   revision__lt=check.design.revision).order_by("-revision").first()
    if parent is None:
        return None
    return parent.checks.filter(status=Check.DONE, printer=check.printer, material=check.material).order_by("-created_at").first()
