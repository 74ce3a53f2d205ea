"""Checks: queue one for a design, follow its stage and progress, cancel it, fetch its report."""

import mimetypes
from typing import Any, Literal
from uuid import UUID

from django.core.files.storage import default_storage
from django.http import FileResponse, HttpResponse
from ninja import Field, Query, Router, Schema, Status
from ninja.pagination import paginate

from services.report import EXTRA_FILES
from services.requirements import Requirements
from services.settings import CheckSettings, OpticsSettings
from webapp.api import selectors, services
from webapp.api.endpoints.common import Pages, errors
from webapp.api.schemas import CheckIn, CheckOut, CheckStatus, Verdict
from webapp.checks import services as checks_services
from webapp.checks.selectors import check_get_for, design_get_for
from webapp.checks.services import ApplicationError

router = Router(tags=["checks"])

BINARY = {"schema": {"type": "string", "format": "binary"}}


class CheckFilters(Schema):
    design: UUID | None = Field(None, description="checks of this design")
    status: CheckStatus | Literal[""] = ""
    verdict: Verdict | Literal[""] = ""


@router.get("/checks", response={200: list[CheckOut], **errors(422)}, url_name="check_list")
@paginate(Pages)
def check_list(request, filters: Query[CheckFilters]):
    """List your checks, newest first."""
    return selectors.check_filter(user=request.auth, **filters.dict()).order_by("-created_at", "-id")


@router.post("/checks", response={200: CheckOut, 201: CheckOut, **errors(400, 403, 404, 422, 429)},
             url_name="check_create")
def check_create(request, body: CheckIn):
    """Queue a check (201); the same design, printer, material and settings again answer 200 with that check."""
    design = design_get_for(user=request.auth, public_id=body.design)
    printer = selectors.printer_get_active(slug=body.printer)
    material = selectors.material_get_active(slug=body.material)
    check, created = services.check_get_or_create(owner=request.auth, design=design, printer=printer,
                                                  material=material, check_settings=_settings(body))
    return Status(201 if created else 200, check)


def _settings(body: CheckIn) -> CheckSettings:
    o = body.optics
    optics = OpticsSettings(freqs_ghz=tuple(o.freqs_ghz), focal_length_mm=o.focal_length_mm,
                            edge_taper_db=o.edge_taper_db, beam_waist_mm=o.beam_waist_mm,
                            clear_aperture_mm=o.clear_aperture_mm)
    requirements = None if body.requirements is None else Requirements.from_dict(body.requirements.dict(exclude_none=True))
    return CheckSettings(orientation=body.orientation, quantities=tuple(body.quantities), optics=optics,
                         requirements=requirements)


@router.get("/checks/{uuid:check_id}", response={200: CheckOut, **errors(404)}, url_name="check_get")
def check_get(request, check_id: UUID):
    """Return the check's status, stage and progress, and its summary once done."""
    return check_get_for(user=request.auth, public_id=check_id)


@router.post("/checks/{uuid:check_id}/cancel", response={200: CheckOut, **errors(403, 404, 409)},
             url_name="check_cancel")
def check_cancel(request, check_id: UUID):
    """Cancel a queued or running check (cancelling a cancelled check changes nothing)."""
    return services.check_cancel(check=check_get_for(user=request.auth, public_id=check_id))


@router.get("/checks/{uuid:check_id}/report", response={200: dict[str, Any], **errors(404)}, url_name="check_report")
def check_report(request, check_id: UUID):
    """Return the report as JSON (schema phasewright.report/1) once the check is done."""
    return _report_of(check_get_for(user=request.auth, public_id=check_id))


def _report_of(check) -> dict:
    if check.report is None:
        raise ApplicationError("report_not_ready", f"The check is {check.status}; its report exists once it is done.",
                               404)
    return check.report


@router.get("/checks/{uuid:check_id}/files/{name}", response=errors(404), url_name="check_file",
            openapi_extra={"responses": {"200": {"description": "a picture (PNG) or the Touchstone file of the report",
                                               "content": {"image/png": BINARY, "application/octet-stream": BINARY}}}})
def check_file(request, check_id: UUID, name: str):
    """Return one of the report's pictures (listed in its ``figures``) or its Touchstone file."""
    check = check_get_for(user=request.auth, public_id=check_id)
    report, path = _report_of(check), check.files_prefix() + name
    if (name not in report.get("figures", []) and name not in EXTRA_FILES) or not default_storage.exists(path):
        raise ApplicationError("no_such_file", f"The report has no file {name!r}; its pictures are listed in "
                               "'figures'.", 404)
    content_type = mimetypes.guess_type(name)[0] if name.endswith(".png") else "application/octet-stream"
    return FileResponse(default_storage.open(path, "rb"), content_type=content_type,
                        as_attachment=not name.endswith(".png"), filename=name)


@router.get("/checks/{uuid:check_id}/report.pdf", response=errors(404), url_name="check_pdf",
            openapi_extra={"responses": {"200": {"description": "the report as a PDF",
                                                 "content": {"application/pdf": BINARY}}}})
def check_pdf(request, check_id: UUID):
    """Return the report as a PDF."""
    check = check_get_for(user=request.auth, public_id=check_id)
    _report_of(check)
    response = HttpResponse(checks_services.check_pdf(check=check, site_root=request.build_absolute_uri("/")), content_type="application/pdf")
    response["Content-Disposition"] = f'attachment; filename="report-{check.public_id}.pdf"'
    return response
