"""Mounted at /api/v1/: an index, the API, and a JSON 404 for any address it does not have."""

from django.http import JsonResponse
from django.urls import path, re_path, reverse

from webapp.api.api import api
from webapp.api.errors import api_not_found


def api_index(request):
    """Point a caller at the description (ninja's own root view answers an HTML 404)."""
    return JsonResponse({"name": api.title, "version": api.version, "openapi": reverse("api:openapi-json")})


urlpatterns = [
    path("", api_index, name="api_index"),
    path("", api.urls),
    re_path(r"^[\s\S]*$", api_not_found),  # any character, line breaks too (a "." would stop at one)
]
