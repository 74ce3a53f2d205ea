"""Refuse a request body over the upload limit before Django reads any of it.

The reverse proxy applies the same limit first (deploy/nginx.conf, client_max_body_size); this is the
second layer, for a site reached without the proxy. The exact per-file check stays in design_create.
"""

from django.conf import settings
from django.http import HttpResponse

from services.sizes import over_limit_text


class RequestSizeLimitMiddleware:
    """Answer 413 with a sentence when Content-Length is over PHASEWRIGHT_MAX_REQUEST_BYTES."""

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        try:
            length = int(request.META.get("CONTENT_LENGTH") or 0)
        except ValueError:
            return HttpResponse("The request's Content-Length is not a number.\n", status=400,
                                content_type="text/plain; charset=utf-8")
        limit = settings.PHASEWRIGHT_MAX_REQUEST_BYTES
        if length > limit:
            return HttpResponse(f"The upload is {over_limit_text(length, limit)}; "
                                "simplify the mesh or export it as binary STL.\n", status=413,
                                content_type="text/plain; charset=utf-8")
        return self.get_response(request)
