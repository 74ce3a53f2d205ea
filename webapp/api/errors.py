"""Every error the API answers is JSON: a stable ``code`` and one ``message`` sentence."""

from __future__ import annotations

import logging

from django.core.exceptions import PermissionDenied
from django.db import DataError
from django.http import Http404, HttpRequest, HttpResponse, JsonResponse
from django.views.decorators.csrf import csrf_exempt
from ninja import NinjaAPI
from ninja.errors import AuthenticationError, HttpError, ValidationError

from services.errors import UnusableInput
from webapp.api.auth import CsrfFailed
from webapp.catalogue.services import CatalogueInvalid
from webapp.checks.services import ApplicationError

logger = logging.getLogger(__name__)

# How long a client over its queued-check limit should wait: about one small check on a busy worker.
RETRY_AFTER_S = 30
NOT_FOUND = "Nothing with that id is yours to see; check the id in the address."
NOT_AUTHENTICATED = "Send a personal API token in the Authorization header: 'Authorization: Bearer <token>'."


def error_body(code: str, message: str, errors: list | None = None) -> dict:
    return {"code": code, "message": message, **({"errors": errors} if errors else {})}


@csrf_exempt
def api_not_found(request: HttpRequest, *args, **kwargs) -> HttpResponse:
    """Answer an address the API does not have, in the API's error shape (it changes nothing, so no CSRF)."""
    return JsonResponse(error_body("not_found", "The API has no such address; see /api/v1/openapi.json."), status=404)


def _validation_message(errors: list[dict]) -> str:
    first = errors[0] if errors else {}
    where = ".".join(str(p) for p in first.get("loc", ()) if p not in ("body", "query", "path", "form", "payload"))
    if first.get("type") == "extra_forbidden":
        return f"{where}: this request has no such field (the API description, /api/v1/openapi.json, lists them)."
    return f"{where or 'The request'}: {first.get('msg', 'is not valid')}."


def install_error_handlers(api: NinjaAPI) -> None:
    """Turn every exception an endpoint can raise into a JSON error with the right status."""

    def respond(request, status: int, code: str, message: str, errors=None, headers=None) -> HttpResponse:
        response = api.create_response(request, error_body(code, message, errors), status=status)
        for key, value in (headers or {}).items():
            response[key] = value
        return response

    @api.exception_handler(ApplicationError)
    def application_error(request, exc: ApplicationError):
        headers = {"Retry-After": str(RETRY_AFTER_S)} if exc.status == 429 else None
        return respond(request, exc.status, exc.code, exc.message, headers=headers)

    @api.exception_handler(UnusableInput)
    def unusable_input(request, exc: UnusableInput):
        return respond(request, 400, exc.code, exc.message)

    @api.exception_handler(CatalogueInvalid)
    def invalid_entry(request, exc: CatalogueInvalid):
        errors = [{"loc": [path] if path else [], "msg": message, "type": "invalid"} for path, message in exc.problems]
        return respond(request, 400, "invalid_entry", str(exc), errors=errors)

    @api.exception_handler(Http404)
    def not_found(request, exc):
        return respond(request, 404, "not_found", NOT_FOUND)

    @api.exception_handler(AuthenticationError)
    def not_authenticated(request, exc):
        return respond(request, 401, "not_authenticated", NOT_AUTHENTICATED, headers={"WWW-Authenticate": "Bearer"})

    @api.exception_handler(CsrfFailed)
    def csrf_failed(request, exc):
        return respond(request, 403, "csrf_failed", "A call with the site's session needs the X-CSRFToken header; "
                       "scripts should use an API token instead.")

    @api.exception_handler(PermissionDenied)
    def forbidden(request, exc):
        return respond(request, 403, "forbidden", str(exc) or "Only a lab manager may change this.")

    @api.exception_handler(ValidationError)
    def invalid(request, exc: ValidationError):
        errors = [{"loc": list(e.get("loc", ())), "msg": str(e.get("msg", "")), "type": str(e.get("type", ""))}
                  for e in exc.errors]
        return respond(request, 422, "invalid_request", _validation_message(errors), errors=errors)

    @api.exception_handler(HttpError)
    def http_error(request, exc: HttpError):
        return respond(request, exc.status_code, "bad_request" if exc.status_code == 400 else f"http_{exc.status_code}",
                       str(exc).rstrip(".") + ".")

    @api.exception_handler(DataError)
    def unstorable(request, exc: DataError):
        # A NUL (0x00) that reached the database in a path or a free-form field the schema does not pattern:
        # PostgreSQL refuses it. Nothing holds such a name, and nothing of it can be stored.
        if "NUL" not in str(exc):
            return internal(request, exc)
        if request.method == "GET":
            return respond(request, 404, "not_found", NOT_FOUND)
        return respond(request, 400, "bad_text", "Text in the request holds a NUL character (0x00), which cannot "
                       "be stored; remove it.")

    @api.exception_handler(Exception)
    def internal(request, exc):
        logger.exception("API call %s %s failed", request.method, request.path)
        return respond(request, 500, "internal_error", "The server failed on this call; the team has the details "
                       "in the log. Try again, or report it.")
