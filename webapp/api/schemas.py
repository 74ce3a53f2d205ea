"""The shapes the API reads and writes; the OpenAPI description is generated from them."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal
from uuid import UUID

from django.urls import reverse
from ninja import Field, Schema
from pydantic import ConfigDict

from services.components import KINDS
from services.settings import ORIENTATIONS

Units = Literal["", "mm", "um", "cm", "m", "inch"]
Orientation = Literal[ORIENTATIONS]  # type: ignore[valid-type]
Kind = Literal[KINDS]  # type: ignore[valid-type]
CheckStatus = Literal["queued", "running", "done", "failed", "cancelled"]
Verdict = Literal["printable", "printable_with_cautions", "not_printable"]
Meets = Literal["yes", "no", "not_evaluated", "not_stated"]
Quantity = Annotated[int, Field(ge=1, le=100_000)]
FreqGhz = Annotated[float, Field(gt=0, le=10_000)]


# Free text must not hold NUL (0x00): PostgreSQL text and jsonb cannot store it (Django's own form fields refuse it
# too). Written into the schema, so clients and the API's description both see the rule.
NO_NUL = "^[^\\x00]*$"
Text = Annotated[str, Field(pattern=NO_NUL)]


class ErrorOut(Schema):
    code: str = Field(description="stable machine-readable key, e.g. not_found, too_many_checks")
    message: str = Field(description="one sentence a person can act on")
    errors: list[dict[str, Any]] | None = Field(None, description="per-field details of a request that is not valid")


class MeOut(Schema):
    username: str
    lab_manager: bool


class DesignOut(Schema):
    id: UUID
    name: str
    sha256: str
    units: str = Field(description="blank: not stated (mm assumed, implausible sizes flagged)")
    size_bytes: int
    parametric: bool
    kind: str | None = Field(description="component kind of a parametric design")
    parameters: dict[str, Any] | None = Field(description="every input and derived value of a parametric design")
    family: UUID = Field(description="shared by every revision of one design")
    revision: int = Field(description="1 for the first version")
    revision_of: UUID | None
    note: str = Field(description="what changed in this revision")
    created_at: datetime

    @staticmethod
    def resolve_id(obj) -> UUID:
        return obj.public_id

    @staticmethod
    def resolve_parametric(obj) -> bool:
        return bool(obj.kind)

    @staticmethod
    def resolve_kind(obj) -> str | None:
        return obj.kind or None

    @staticmethod
    def resolve_revision_of(obj) -> UUID | None:
        return obj.revision_of.public_id if obj.revision_of_id else None


class StrictIn(Schema):
    """A request body: a field it does not have is refused by name (a misspelt or misplaced target, e.g.
    ``requirements`` sent with a parametric design, would otherwise be dropped without a word)."""

    model_config = ConfigDict(extra="forbid")


class ParametricIn(StrictIn):
    kind: Kind
    # Keys stay plain str: a key pattern reaches the description as propertyNames, which clients and fuzzers
    # do not all honour; a key that is not a parameter of the kind (a NUL in it included) is refused with a
    # sentence by the generator's own check.
    parameters: dict[str, float | int | Text] = Field(default_factory=dict, description="see GET /components")
    printer: str = Field(pattern=NO_NUL, description="printer slug: the part must fit its build volume")
    material: str = Field(pattern=NO_NUL, description="material slug: its index shapes the part")
    revision_of: UUID | None = None
    note: str = Field("", max_length=300, pattern=NO_NUL, description="what changed in this revision")


class OpticsIn(StrictIn):
    freqs_ghz: list[FreqGhz] = Field(default_factory=list, max_length=201, description="empty: the material's band")
    focal_length_mm: float | None = Field(None, gt=0)
    edge_taper_db: float | None = Field(None, gt=0, le=60)
    beam_waist_mm: float | None = Field(None, gt=0)
    clear_aperture_mm: float | None = Field(None, gt=0, description="optical zone diameter; empty: the "
                                            "generator's, else detected from the part")


class RequirementsIn(StrictIn):
    """The designer's targets; each checked as designed, as printed and over the printer's tolerance band."""

    band_ghz: list[FreqGhz] | None = Field(None, min_length=2, max_length=2, description="[low, high]; with no "
                                           "design frequencies, the optics are evaluated at its ends and middle")
    max_insertion_loss_db: float | None = Field(None, gt=0)
    loss_basis: Literal["each_frequency", "band_average"] = "each_frequency"
    max_spot_fwhm_ratio: float | None = Field(None, description="spot FWHM at the design focal plane over the "
                                                                "diffraction-limited FWHM")
    min_focusing_efficiency: float | None = Field(None, description="0 to 1")
    min_strehl: float | None = Field(None, description="0 to 1")
    focal_length_mm: float | None = Field(None, gt=0, description="where the wavefront must converge, from the "
                                                                  "part's far extreme")
    focal_tolerance_mm: float | None = Field(None, gt=0, description="+- around focal_length_mm; required with it")
    max_thickness_mm: float | None = Field(None, gt=0)
    max_diameter_mm: float | None = Field(None, gt=0)
    f_number_min: float | None = Field(None, gt=0)
    f_number_max: float | None = Field(None, gt=0)
    min_mode_purity: float | None = Field(None, description="vortex plates, 0 to 1")


class CheckIn(StrictIn):
    design: UUID
    printer: str = Field(pattern=NO_NUL)
    material: str = Field(pattern=NO_NUL)
    orientation: Orientation = "+z"
    quantities: list[Quantity] = Field(default_factory=lambda: [1, 5, 10, 25], min_length=1, max_length=20)
    optics: OpticsIn = Field(default_factory=OpticsIn)
    requirements: RequirementsIn | None = Field(None, description="null: none stated (meets_requirements "
                                                                  "reads not_stated)")


class SummaryOut(Schema):
    verdict: Verdict
    meets_requirements: Meets = Field(description="yes | no against the stated requirements; not_evaluated (none "
                                                  "missed, some could not be judged); not_stated")
    blockers: int
    cautions: int
    notes: int
    material_ml: float | None
    print_time_s: float | None
    currency: str | None
    cost_per_part: float | None
    quote: list[dict[str, float]] = Field(description="quantity, total and per_part for each quantity asked")


class LinksOut(Schema):
    self: str
    report: str
    page: str


class CheckOut(Schema):
    id: UUID
    design: UUID
    design_name: str
    printer: str
    material: str
    settings: dict[str, Any]
    status: CheckStatus
    stage: str
    progress: float = Field(description="0 to 1")
    attempts: int
    verdict: Verdict | None
    meets_requirements: Meets | None = Field(description="once done: yes | no | not_evaluated | not_stated (kept apart "
                                                         "from the verdict, which speaks only of printability)")
    error_code: str | None
    error: str | None
    created_at: datetime
    started_at: datetime | None
    finished_at: datetime | None
    summary: SummaryOut | None
    links: LinksOut

    @staticmethod
    def resolve_id(obj) -> UUID:
        return obj.public_id

    @staticmethod
    def resolve_design(obj) -> UUID:
        return obj.design.public_id

    @staticmethod
    def resolve_design_name(obj) -> str:
        return obj.design.name

    @staticmethod
    def resolve_printer(obj) -> str:
        return obj.printer_snapshot.get("slug", "")

    @staticmethod
    def resolve_material(obj) -> str:
        return obj.material_snapshot.get("slug", "")

    @staticmethod
    def resolve_progress(obj) -> float:
        return round(obj.progress, 3)

    @staticmethod
    def resolve_verdict(obj) -> str | None:
        return obj.verdict or None

    @staticmethod
    def resolve_meets_requirements(obj) -> str | None:
        return obj.report.get("meets_requirements", "not_stated") if obj.report else None

    @staticmethod
    def resolve_error_code(obj) -> str | None:
        return obj.error_code or None

    @staticmethod
    def resolve_error(obj) -> str | None:
        return obj.error or None

    @staticmethod
    def resolve_summary(obj) -> dict | None:
        return report_summary(obj.report) if obj.report else None

    @staticmethod
    def resolve_links(obj) -> dict:
        return {"self": reverse("api:check_get", args=[obj.public_id]),
                "report": reverse("api:check_report", args=[obj.public_id]),
                "page": reverse("check", args=[obj.public_id])}


def report_summary(report: dict) -> dict:
    """Return the few numbers a table of many checks shows, from a stored report."""
    # Requirement findings stand apart from the printability counts, as meets_requirements does from the verdict.
    severities = [f.get("severity") for f in report.get("findings", []) if f.get("rule") != "requirement"]
    estimate = report.get("estimate") or {}
    cost = estimate.get("cost") or {}
    return {"verdict": report["verdict"], "meets_requirements": report.get("meets_requirements", "not_stated"),
            "blockers": severities.count("blocker"),
            "cautions": severities.count("caution"), "notes": severities.count("note"),
            "material_ml": estimate.get("material_ml"), "print_time_s": estimate.get("print_time_s"),
            "currency": cost.get("currency"), "cost_per_part": cost.get("total"),
            "quote": [{"quantity": r["quantity"], "total": r["total"], "per_part": r["per_part"]}
                      for r in estimate.get("quantities", [])]}


class CatalogueOut(Schema):
    slug: str
    name: str
    version: int
    retired: bool
    updated_at: datetime
    data: dict[str, Any] = Field(description="every field of the printer profile or material, with sources")


class CatalogueIn(StrictIn):
    slug: str = Field(max_length=50, pattern=NO_NUL, description="short name: lower-case letters, digits and hyphens")
    name: str = Field(max_length=120, pattern=NO_NUL)
    data: dict[str, Any] = Field(description="every field of the printer profile or material (see GET of one)")
    note: str = Field("", max_length=300, pattern=NO_NUL, description="why it was added")


class CatalogueUpdateIn(StrictIn):
    data: dict[str, Any] = Field(description="the whole new data; unchanged data makes no new version")
    name: str | None = Field(None, max_length=120, pattern=NO_NUL)
    note: str = Field("", max_length=300, pattern=NO_NUL, description="what changed and why")
    base_version: int | None = Field(None, description="the version the edit started from; a newer one refuses it")


class RetireIn(StrictIn):
    retired: bool = Field(True, description="false brings a retired entry back")


class PrintLogIn(StrictIn):
    check: UUID = Field(description="the finished check whose part was printed")
    actual_print_time_s: float
    succeeded: bool
    actual_material_ml: float | None = Field(None, description="null: not measured")
    failure_reason: str = Field("", max_length=2000, pattern=NO_NUL)
    copies: int = Field(1, ge=1, le=10_000, description="copies printed together in the build")


class PrintLogOut(Schema):
    id: UUID
    check: UUID
    design_name: str
    printer: str
    logged_by: str | None
    copies: int
    actual_print_time_s: float | None = Field(description="null for a row stored without a finite time")
    actual_material_ml: float | None
    succeeded: bool
    failure_reason: str
    estimated_print_time_s: float
    estimated_material_ml: float
    time_ratio: float | None = Field(description="actual over estimated print time; null for a row stored "
                                                 "without usable times")
    accepted_at: datetime | None = Field(description="when a lab manager accepted it into the calibration; "
                                                     "null: not counted yet")
    accepted_by: str | None
    created_at: datetime

    @staticmethod
    def resolve_id(obj) -> UUID:
        return obj.public_id

    @staticmethod
    def resolve_check(obj) -> UUID:
        return obj.logged_check.public_id

    @staticmethod
    def resolve_design_name(obj) -> str:
        return obj.logged_check.design.name

    @staticmethod
    def resolve_actual_print_time_s(obj) -> float | None:
        return obj.actual_print_time_s if obj.usable else None

    @staticmethod
    def resolve_accepted_by(obj) -> str | None:
        return obj.accepted_by.get_username() if obj.accepted_by_id else None

    @staticmethod
    def resolve_printer(obj) -> str:
        return obj.logged_check.printer_snapshot.get("slug", "")

    @staticmethod
    def resolve_logged_by(obj) -> str | None:
        return obj.logged_by.get_username() if obj.logged_by_id else None


class ParamSpecOut(Schema):
    name: str
    unit: str
    default: float | int | str | None
    help: str
    type: str
    min: float | None
    max: float | None
    min_exclusive: bool
    choices: list[str]


class ComponentOut(Schema):
    kind: str
    parameters: list[ParamSpecOut]
