"""Designs: upload a mesh or build a parametric part, list them, follow their revisions."""

from datetime import UTC, datetime
from typing import Annotated, Literal
from uuid import UUID

from django.conf import settings
from ninja import Field, File, Form, Query, Router, Schema, Status, UploadedFile
from ninja.pagination import paginate
from pydantic import BeforeValidator

from services.sizes import over_limit_text
from webapp.api import selectors, services
from webapp.api.endpoints.common import Pages, errors
from webapp.api.schemas import NO_NUL, DesignOut, Kind, ParametricIn, Units
from webapp.checks.selectors import design_get_for
from webapp.checks.services import ApplicationError

router = Router(tags=["designs"])
# A form field cannot be null: no revision is the empty string.
UUID_OR_NOTHING = "^([0-9a-fA-F]{8}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{12})?$"


def _iso_8601(value):
    """Read a date-time only as ISO 8601 (pydantic would also take a bare number as a Unix time)."""
    if isinstance(value, str):
        parsed = datetime.fromisoformat(value)
        return parsed if parsed.tzinfo else parsed.replace(tzinfo=UTC)
    return value


IsoDatetime = Annotated[datetime, BeforeValidator(_iso_8601)]


class DesignFilters(Schema):
    q: str = Field("", max_length=200, pattern=NO_NUL, description="part of the design's name")
    sha256: str = Field("", pattern="^([0-9a-fA-F]{64})?$", description="the sha256 of the uploaded bytes")
    kind: Kind | Literal[""] = Field("", description="parametric designs of this component kind")
    parametric: bool | None = None
    created_after: IsoDatetime | None = None
    created_before: IsoDatetime | None = None


@router.get("/designs", response={200: list[DesignOut], **errors(422)}, url_name="design_list")
@paginate(Pages)
def design_list(request, filters: Query[DesignFilters]):
    """List your designs, newest first."""
    return selectors.design_filter(user=request.auth, **filters.dict()).order_by("-created_at", "-id")


@router.post("/designs", response={200: DesignOut, 201: DesignOut, **errors(400, 403, 404, 413, 422)},
             url_name="design_upload")
def design_upload(request, file: File[UploadedFile], units: Form[Units] = "", name: str = Form("", pattern=NO_NUL),
                  revision_of: str = Form("", pattern=UUID_OR_NOTHING), note: str = Form("", pattern=NO_NUL)):
    """Upload a mesh (STL, 3MF, OBJ, PLY); the same bytes and units again answer 200 with the same design."""
    parent = design_get_for(user=request.auth, public_id=UUID(revision_of)) if revision_of else None
    design, created = services.design_get_or_create(owner=request.auth, name=name or file.name or "unnamed",
                                                    data=_read(file), units=units, revision_of=parent,
                                                    note=note[:300])
    return Status(201 if created else 200, design)


def _read(file: UploadedFile) -> bytes:
    """Read the upload, refusing it before reading when it is over the size limit."""
    limit = settings.PHASEWRIGHT_MAX_UPLOAD_BYTES
    if file.size is not None and file.size > limit:
        raise ApplicationError("too_large", f"{file.name}: {over_limit_text(file.size, limit)}.", status=413)
    return file.read()


@router.post("/designs/parametric", response={200: DesignOut, 201: DesignOut, **errors(400, 403, 404, 413, 422)},
             url_name="design_parametric")
def design_parametric(request, body: ParametricIn):
    """Build a part from component parameters (see /components) and store it as a design."""
    parent = design_get_for(user=request.auth, public_id=body.revision_of) if body.revision_of else None
    printer = selectors.printer_get_active(slug=body.printer)
    material = selectors.material_get_active(slug=body.material)
    design, created = services.design_create_parametric(owner=request.auth, kind=body.kind, parameters=body.parameters,
                                                        printer=printer, material=material, revision_of=parent,
                                                        note=body.note)
    return Status(201 if created else 200, design)


@router.get("/designs/{uuid:design_id}", response={200: DesignOut, **errors(404)}, url_name="design_get")
def design_get(request, design_id: UUID):
    """Return one of your designs."""
    return design_get_for(user=request.auth, public_id=design_id)


@router.get("/designs/{uuid:design_id}/revisions", response={200: list[DesignOut], **errors(404)},
            url_name="design_revisions")
def design_revisions(request, design_id: UUID):
    """Return every revision of the design, first revision first (the design itself among them)."""
    design = design_get_for(user=request.auth, public_id=design_id)
    return selectors.design_revisions_for(user=request.auth, design=design)
