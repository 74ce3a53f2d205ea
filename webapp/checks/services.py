"""Write side: submit designs, queue checks, run a check in a worker, store its report."""

from __future__ import annotations

import hashlib
import time
import uuid
from dataclasses import replace
from datetime import timedelta

from django.conf import settings
from django.core.files.base import ContentFile
from django.core.files.storage import default_storage
from django.db import transaction
from django.db.models import F, Q
from django.utils import timezone

from services.errors import UnusableInput
from services.intake import UNITS, IntakeLimits, read_part
from services.profiles import Material, PrinterProfile
from services.report import build_report
from services.settings import CheckSettings
from webapp.catalogue.selectors import calibration_for
from webapp.checks.models import Check, Design

PROGRESS_WRITE_INTERVAL_S = 1.0


class ApplicationError(Exception):
    """A refusal of the web layer (quota, bad form value), carrying one sentence for the user."""

    def __init__(self, code: str, message: str, status: int = 400) -> None:
        super().__init__(message)
        self.code, self.message, self.status = code, message, status


def intake_limits() -> IntakeLimits:
    return IntakeLimits(max_bytes=settings.PHASEWRIGHT_MAX_UPLOAD_BYTES, max_triangles=settings.PHASEWRIGHT_MAX_TRIANGLES,
                        max_extent_mm=float(settings.PHASEWRIGHT_MAX_EXTENT_MM))


def _clean_name(name: str) -> str:
    """Keep a display name only: no folders, no control characters, bounded length."""
    base = name.replace("\\", "/").rsplit("/", 1)[-1]
    return "".join(ch for ch in base if ch.isprintable())[:200] or "unnamed"


def design_create(*, owner, name: str, data: bytes, units: str = "", parameters: dict | None = None,
                  revision_of: Design | None = None, kind: str = "", note: str = "") -> Design:
    """Store the bytes under a generated name and record the design; parsing waits for the worker.

    A revision joins its parent's family and takes the next revision number in it.
    """
    if not data:
        raise ApplicationError("empty_file", f"{_clean_name(name)}: the file is empty.")
    if len(data) > settings.PHASEWRIGHT_MAX_UPLOAD_BYTES:
        raise ApplicationError("too_large", f"{_clean_name(name)}: {len(data) / 2**20:.0f} MB is over the "
                               f"{settings.PHASEWRIGHT_MAX_UPLOAD_BYTES / 2**20:.0f} MB limit.", status=413)
    if units and units not in UNITS:
        raise ApplicationError("bad_units", f"Unknown units {units!r}: choose one of {', '.join(UNITS)}.")
    stored = default_storage.save(f"designs/{uuid.uuid4().hex}.bin", ContentFile(data))
    lineage = _lineage(revision_of)
    return Design.objects.create(owner=owner, name=_clean_name(name), sha256=hashlib.sha256(data).hexdigest(),
                                 units=units, stored_name=stored, size_bytes=len(data), parameters=parameters,
                                 revision_of=revision_of, kind=kind, note=note[:300], **lineage)


def _lineage(revision_of: Design | None) -> dict:
    """Return the family and revision number of a new design (a fresh family without a parent)."""
    if revision_of is None:
        return {}
    latest = Design.objects.filter(family=revision_of.family).order_by("-revision").values_list("revision", flat=True).first()
    return {"family": revision_of.family, "revision": (latest or revision_of.revision) + 1}


def check_create(*, owner, design: Design, printer, material, check_settings: CheckSettings) -> Check:
    """Queue a check of a design; the worker starts only after the row is committed."""
    from webapp.checks.tasks import run_check

    with transaction.atomic():
        active = Check.objects.filter(owner=owner, status__in=Check.ACTIVE).count()
        if active >= settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS:
            raise ApplicationError("too_many_checks", f"You have {active} checks waiting or running; "
                                   "wait for some to finish before queuing more.", status=429)
        check = Check.objects.create(owner=owner, design=design, printer=printer, material=material,
                                     printer_snapshot=printer.snapshot().to_dict(),
                                     material_snapshot=material.snapshot().to_dict(),
                                     settings=check_settings.to_dict())
        transaction.on_commit(lambda: run_check.delay(check.pk))
    return check


def check_claim(*, check_id: int) -> bool:
    """Claim a check for this attempt with one conditional update; False when it is not ours to run."""
    now = timezone.now()
    claimed = Check.objects.filter(pk=check_id, status__in=Check.ACTIVE,
                                   attempts__lt=settings.PHASEWRIGHT_MAX_ATTEMPTS).update(
        status=Check.RUNNING, attempts=F("attempts") + 1, started_at=now, heartbeat_at=now, stage="reading", progress=0.0)
    return claimed == 1


def check_fail(*, check_id: int, code: str, message: str) -> None:
    Check.objects.filter(pk=check_id).exclude(status__in=(Check.DONE, Check.CANCELLED)).update(
        status=Check.FAILED, error_code=code, error=message, finished_at=timezone.now(), heartbeat_at=timezone.now())


def _progress_writer(check_id: int):
    """Return a progress callback that writes at most once a second (each write is a heartbeat)."""
    last = [0.0]

    def write(stage: str, fraction: float) -> None:
        now = time.monotonic()
        if now - last[0] >= PROGRESS_WRITE_INTERVAL_S:
            last[0] = now
            Check.objects.filter(pk=check_id, status=Check.RUNNING).update(
                stage=stage, progress=fraction, heartbeat_at=timezone.now())
    return write


def check_run(*, check_id: int) -> None:
    """Run one check end to end in a worker: claim, read, build the report, store it."""
    if not check_claim(check_id=check_id):
        return
    check = Check.objects.select_related("design").get(pk=check_id)
    try:
        with default_storage.open(check.design.stored_name, "rb") as fh:
            data = fh.read()
        part = read_part(data, name=check.design.name, units=check.design.units or None, limits=intake_limits())
        if check.design.parameters:
            part = replace(part, parameters=check.design.parameters)
        report = build_report(part=part, printer=PrinterProfile.from_dict(check.printer_snapshot),
                              material=Material.from_dict(check.material_snapshot),
                              settings=CheckSettings.from_dict(check.settings), progress=_progress_writer(check_id),
                              calibration=calibration_for(check.printer, check.printer_snapshot))
    except UnusableInput as exc:
        check_fail(check_id=check_id, code=exc.code, message=exc.message)
        return
    report_store(check=check, report=report)


def report_store(*, check: Check, report) -> None:
    """Write the pictures, then the report and status in one transaction (a rerun rewrites the same)."""
    for name, png in report.figures.items():
        path = check.files_prefix() + name
        if default_storage.exists(path):
            default_storage.delete(path)
        default_storage.save(path, ContentFile(png))
    if report.touchstone:
        path = check.files_prefix() + "transmission.s2p"
        if default_storage.exists(path):
            default_storage.delete(path)
        default_storage.save(path, ContentFile(report.touchstone.encode()))
    with transaction.atomic():
        # A check cancelled while it ran stays cancelled: the user no longer wants this report.
        Check.objects.filter(pk=check.pk).exclude(status=Check.CANCELLED).update(
            status=Check.DONE, stage="done", progress=1.0, report=report.to_dict(), verdict=report.verdict,
            finished_at=timezone.now(), heartbeat_at=timezone.now(), error="", error_code="")


def worker_lost_sentence() -> str:
    """Return why a check failed after every attempt lost its worker (killed, most often for memory)."""
    times = {1: "once", 2: "twice", 3: "three times"}.get(settings.PHASEWRIGHT_MAX_ATTEMPTS,
                                                          f"{settings.PHASEWRIGHT_MAX_ATTEMPTS} times")
    return (f"The worker was lost {times} while checking this part; the part may exceed the memory limit, "
            "so simplify the mesh or ask for a larger worker.")


def check_requeue_stale(*, now=None, stale_after_s: int | None = None) -> tuple[int, int]:
    """Requeue running checks whose heartbeat went stale; fail those out of attempts. Return (requeued, failed)."""
    from webapp.checks.tasks import run_check

    now = now or timezone.now()
    stale_after_s = stale_after_s or 2 * settings.CELERY_TASK_SOFT_TIME_LIMIT
    stale = Check.objects.filter(status=Check.RUNNING, heartbeat_at__lt=now - timedelta(seconds=stale_after_s))
    lost = stale.filter(attempts__gte=settings.PHASEWRIGHT_MAX_ATTEMPTS)
    failed = lost.update(status=Check.FAILED, error_code="worker_lost", finished_at=now,
                         error=worker_lost_sentence())
    requeued = 0
    for check in stale.filter(attempts__lt=settings.PHASEWRIGHT_MAX_ATTEMPTS):
        if Check.objects.filter(pk=check.pk, status=Check.RUNNING, heartbeat_at=check.heartbeat_at).update(
                status=Check.QUEUED, stage="requeued", heartbeat_at=now):
            transaction.on_commit(lambda pk=check.pk: run_check.delay(pk))
            requeued += 1
    # Queued checks whose message a folder broker lost with a killed worker: resend them too.
    for check in Check.objects.filter(status=Check.QUEUED, created_at__lt=now - timedelta(seconds=stale_after_s)).filter(
            Q(heartbeat_at__isnull=True) | Q(heartbeat_at__lt=now - timedelta(seconds=stale_after_s))):
        if Check.objects.filter(pk=check.pk, status=Check.QUEUED).update(heartbeat_at=now):
            transaction.on_commit(lambda pk=check.pk: run_check.delay(pk))
            requeued += 1
    return requeued, failed


def design_create_parametric(*, owner, kind: str, params: dict, printer, material, revision_of: Design | None = None,
                             note: str = ""):
    """Build a parametric part for this printer and material, store its mesh as a design; return (design, component).

    The part is built here, not in the worker, so a parameter the builder refuses comes back to
    the form at once, beside its field.
    """
    from services.components import build_component, export_mesh

    component = build_component(kind, params, material=material.snapshot(), printer=printer.snapshot())
    data = export_mesh(component.part, "stl")
    design = design_create(owner=owner, name=f"{component.part.name}.stl", data=data, units="mm",
                           parameters=component.part.parameters, revision_of=revision_of, kind=kind, note=note)
    return design, component


def check_figures(*, check: Check) -> dict[str, bytes]:
    """Return the stored pictures of a finished check by name (missing files are left out)."""
    figures = {}
    for name in (check.report or {}).get("figures", []):
        path = check.files_prefix() + name
        if default_storage.exists(path):
            with default_storage.open(path, "rb") as fh:
                figures[name] = fh.read()
    return figures


def check_pdf(*, check: Check) -> bytes:
    """Return the report as a PDF, drawn once from the stored report and pictures and then kept."""
    from services.pdf_report import report_pdf

    path = check.files_prefix() + "report.pdf"
    if default_storage.exists(path):
        with default_storage.open(path, "rb") as fh:
            return fh.read()
    link = f"{settings.SITE_ROOT.rstrip('/')}/checks/{check.public_id}/"
    pdf = report_pdf(check.report, check_figures(check=check), checked_at=check.finished_at or timezone.now(), link=link)
    default_storage.save(path, ContentFile(pdf))
    return pdf
