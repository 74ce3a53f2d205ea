"""Write side of the API: tokens, deduplicated designs and checks, cancelling.

Designs and checks are created by ``webapp.checks.services``; what is added here is the
"same request, same object" rule the API promises, taken under a per-user row lock so two
concurrent uploads of the same bytes cannot both create a design.
"""

from __future__ import annotations

import hashlib
from datetime import datetime, timedelta

from django.contrib.auth import get_user_model
from django.db import transaction
from django.utils import timezone

from services.components import build_component, export_mesh
from services.profiles import check_pairing
from services.settings import CheckSettings
from webapp.api import tokens
from webapp.api.models import ApiToken
from webapp.checks import services as checks
from webapp.checks.models import Check, Design
from webapp.checks.services import ApplicationError

# Writing last_used_at on every call would turn each read into a write; once a minute is enough to show.
LAST_USED_RESOLUTION = timedelta(minutes=1)
REUSABLE_STATUSES = (Check.QUEUED, Check.RUNNING, Check.DONE)


def api_token_create(*, user, name: str) -> tuple[ApiToken, str]:
    """Create a named token for the user; return the row and the token itself (shown once)."""
    name = " ".join(name.split())[:100]
    if not name:
        raise ApplicationError("bad_token_name", "Give the token a name, such as the script or machine using it.")
    raw = tokens.make_token()
    token = ApiToken.objects.create(user=user, name=name, prefix=tokens.prefix_of(raw), digest=tokens.digest_of(raw))
    return token, raw


def api_token_revoke(*, token: ApiToken, now: datetime | None = None) -> None:
    """Revoke the token from now on (the row stays, to show when it was last used)."""
    ApiToken.objects.filter(pk=token.pk, revoked_at__isnull=True).update(revoked_at=now or timezone.now())


def api_token_authenticate(*, raw: str, now: datetime | None = None):
    """Return the active user the token belongs to, or None; note when the token was last used."""
    if not tokens.looks_like_token(raw):
        return None
    now = now or timezone.now()
    candidates = ApiToken.objects.filter(prefix=tokens.prefix_of(raw), revoked_at__isnull=True).select_related("user")
    for token in candidates:
        if tokens.same_digest(token.digest, raw) and token.user.is_active:
            if token.last_used_at is None or now - token.last_used_at >= LAST_USED_RESOLUTION:
                ApiToken.objects.filter(pk=token.pk).update(last_used_at=now)
            return token.user
    return None


def _lock_user(owner) -> None:
    """Serialise one user's creations (a row lock on PostgreSQL; SQLite's write lock does the same)."""
    get_user_model().objects.select_for_update().filter(pk=owner.pk).first()


def design_get_or_create(*, owner, name: str, data: bytes, units: str = "", revision_of: Design | None = None,
                         **extra) -> tuple[Design, bool]:
    """Return the user's design with these bytes and units, or store a new one; and whether it is new.

    ``extra`` (parameters, kind, note) goes to ``design_create`` for a new design only.
    """
    sha256 = hashlib.sha256(data).hexdigest()
    with transaction.atomic():
        _lock_user(owner)
        existing = Design.objects.filter(owner=owner, sha256=sha256, units=units).order_by("created_at").first()
        if existing is not None:
            return existing, False
        return checks.design_create(owner=owner, name=name, data=data, units=units, revision_of=revision_of,
                                    **extra), True


def design_create_parametric(*, owner, kind: str, parameters: dict, printer, material,
                             revision_of: Design | None = None, note: str = "") -> tuple[Design, bool]:
    """Build a parametric part (it must fit the printer, which bounds the work) and store its mesh once.

    The mesh is the STL the site's own form makes, so the same parameters from the page and from
    the API meet in one design.
    """
    component = build_component(kind, parameters, material=material.snapshot(), printer=printer.snapshot())
    return design_get_or_create(owner=owner, name=f"{component.part.name}.stl", data=export_mesh(component.part, "stl"),
                                units="mm", revision_of=revision_of, parameters=component.part.parameters, kind=kind,
                                note=note)


def _same_check(check: Check, *, printer, material, wanted: dict) -> bool:
    """Return True when the check ran (or runs) on these versions of printer and material with these settings."""
    return (check.settings == wanted and check.printer_snapshot.get("version") == printer.version
            and check.material_snapshot.get("version") == material.version)


def check_get_or_create(*, owner, design: Design, printer, material,
                        check_settings: CheckSettings) -> tuple[Check, bool]:
    """Return the live or finished check with the same inputs, or queue a new one; and whether it is new."""
    check_pairing(printer.snapshot(), material.snapshot())
    wanted = check_settings.to_dict()
    with transaction.atomic():
        _lock_user(owner)
        same = Check.objects.filter(owner=owner, design=design, printer=printer, material=material,
                                    status__in=REUSABLE_STATUSES).order_by("-created_at")
        for check in same:
            if _same_check(check, printer=printer, material=material, wanted=wanted):
                return check, False
        return checks.check_create(owner=owner, design=design, printer=printer, material=material,
                                   check_settings=check_settings), True


def check_cancel(*, check: Check, now: datetime | None = None) -> Check:
    """Cancel a queued or running check; a worker that claims it later finds nothing to do."""
    now = now or timezone.now()
    if check.status == Check.CANCELLED:
        return check
    updated = Check.objects.filter(pk=check.pk, status__in=Check.ACTIVE).update(
        status=Check.CANCELLED, stage="cancelled", finished_at=now, heartbeat_at=now)
    check.refresh_from_db()
    if not updated and check.status != Check.CANCELLED:
        raise ApplicationError("not_active", f"The check is already {check.status}; only a queued or running "
                               "check can be cancelled.", status=409)
    return check
