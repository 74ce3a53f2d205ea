"""Print logs: what a finished print really took, against the check's estimate (the calibration's data).

The catalogue's selectors decide who sees what, as on the site: a lab manager every log, a designer
the logs of their own checks.
"""

from uuid import UUID

from django.http import HttpResponse
from ninja import Field, Query, Router, Schema, Status
from ninja.pagination import paginate

from webapp.api.endpoints.common import Pages, errors
from webapp.api.schemas import NO_NUL, PrintLogIn, PrintLogOut
from webapp.catalogue import selectors, services

router = Router(tags=["print logs"])


class PrintLogFilters(Schema):
    printer: str = Field("", pattern=NO_NUL)


@router.get("/print-logs", response={200: list[PrintLogOut], **errors(422)}, url_name="print_log_list")
@paginate(Pages)
def print_log_list(request, filters: Query[PrintLogFilters]):
    """List the print logs you may see, newest first."""
    logs = selectors.print_log_list_for(user=request.auth).order_by("-created_at", "-id")
    return logs.filter(logged_check__printer__slug=filters.printer) if filters.printer else logs


@router.post("/print-logs", response={201: PrintLogOut, **errors(400, 403, 404, 422)}, url_name="print_log_create")
def print_log_create(request, body: PrintLogIn):
    """Log a finished print of a checked part; the printer's time calibration counts it once a lab manager accepts it."""
    check = selectors.check_for_logging(user=request.auth, public_id=body.check)
    log = services.print_log_create(user=request.auth, check=check, copies=body.copies,
                                    actual_print_time_s=body.actual_print_time_s, succeeded=body.succeeded,
                                    actual_material_ml=body.actual_material_ml, failure_reason=body.failure_reason)
    return Status(201, selectors.print_log_get_for(user=request.auth, public_id=log.public_id))


@router.get("/print-logs/{uuid:log_id}", response={200: PrintLogOut, **errors(404)}, url_name="print_log_get")
def print_log_get(request, log_id: UUID):
    """Return one print log."""
    return selectors.print_log_get_for(user=request.auth, public_id=log_id)


@router.post("/print-logs/{uuid:log_id}/accept", response={200: PrintLogOut, **errors(403, 404)},
             url_name="print_log_accept")
def print_log_accept(request, log_id: UUID):
    """Accept a designer's log into the printer's calibration (lab managers only; theirs count at once)."""
    log = services.print_log_accept(user=request.auth, log=selectors.print_log_get_for(user=request.auth, public_id=log_id))
    return selectors.print_log_get_for(user=request.auth, public_id=log.public_id)


@router.delete("/print-logs/{uuid:log_id}", response={204: None, **errors(403, 404)}, url_name="print_log_delete")
def print_log_delete(request, log_id: UUID):
    """Delete a log entered by mistake; the calibration refits without it."""
    services.print_log_delete(log=selectors.print_log_get_for(user=request.auth, public_id=log_id))
    return HttpResponse(status=204)
