"""Read side of the API: every query starts from the user's own rows (a stranger gets a 404)."""

from __future__ import annotations

from django.http import Http404

from webapp.api.models import ApiToken
from webapp.catalogue.selectors import material_list_active, printer_list_active
from webapp.checks.models import Design
from webapp.checks.selectors import check_list_for, design_list_for
from webapp.checks.services import ApplicationError


def api_token_list_for(*, user):
    return ApiToken.objects.filter(user=user)


def api_token_get_for(*, user, public_id) -> ApiToken:
    token = api_token_list_for(user=user).filter(public_id=public_id).first()
    if token is None:
        raise Http404("No such token.")
    return token


def design_filter(*, user, q: str = "", sha256: str = "", kind: str = "", parametric: bool | None = None,
                  created_after=None, created_before=None):
    """Return the user's designs matching every filter given."""
    designs = design_list_for(user=user)
    if q:
        designs = designs.filter(name__icontains=q)
    if sha256:
        designs = designs.filter(sha256=sha256.lower())
    if kind:
        designs = designs.filter(kind=kind)
    if parametric is not None:
        designs = designs.exclude(kind="") if parametric else designs.filter(kind="")
    if created_after:
        designs = designs.filter(created_at__gte=_as_utc(created_after))
    if created_before:
        designs = designs.filter(created_at__lt=_as_utc(created_before))
    return designs


def _as_utc(moment):
    """Return the moment in UTC: PostgreSQL refuses offsets beyond +-15:59 that ISO 8601 parsers accept."""
    from datetime import datetime, timezone

    if moment.tzinfo is None:
        return moment.replace(tzinfo=timezone.utc)
    try:
        return moment.astimezone(timezone.utc)
    except OverflowError:  # year 1 or 9999 pushed past the calendar by its offset
        return datetime.min.replace(tzinfo=timezone.utc) if moment.year < 2 else datetime.max.replace(tzinfo=timezone.utc)


def design_revisions_for(*, user, design: Design):
    """Return every revision in the design's family, first revision first."""
    return design_list_for(user=user).filter(family=design.family).order_by("revision", "created_at")


def check_filter(*, user, design=None, status: str = "", verdict: str = ""):
    """Return the user's checks matching every filter given."""
    checks = check_list_for(user=user)
    if design is not None:
        checks = checks.filter(design__public_id=design)
    if status:
        checks = checks.filter(status=status)
    if verdict:
        checks = checks.filter(verdict=verdict)
    return checks


def printer_get_active(*, slug: str):
    printer = printer_list_active().filter(slug=slug).first()
    if printer is None:
        slugs = ", ".join(printer_list_active().values_list("slug", flat=True))
        raise ApplicationError("unknown_printer", f"There is no printer {slug!r}; choose one of {slugs}.")
    return printer


def material_get_active(*, slug: str):
    material = material_list_active().filter(slug=slug).first()
    if material is None:
        slugs = ", ".join(material_list_active().values_list("slug", flat=True))
        raise ApplicationError("unknown_material", f"There is no material {slug!r}; choose one of {slugs}.")
    return material
