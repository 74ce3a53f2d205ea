"""Read side: every query starts from the user's own objects, so a stranger gets a 404."""

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
