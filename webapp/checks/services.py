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
from django.db.models import F, Q, Sum
from django.utils import timezone

from services.errors import UnusableInput
from services.intake import UNITS, IntakeLimits, read_part
from services.profiles import Material, PrinterProfile
from services.report import PART_VIEW_FILE, build_report
from services.settings import CheckSettings
from services.sizes import over_limit_text, size_text
from webapp.catalogue.selectors import calibration_for
from webapp.checks import queue
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
        raise ApplicationError("too_large", f"{_clean_name(name)}: "
                               f"{over_limit_text(len(data), settings.PHASEWRIGHT_MAX_UPLOAD_BYTES)}.", status=413)
    if problem := _over_quota(owner, name, len(data), stored_bytes(owner=owner)):
        raise ApplicationError("over_quota", problem, status=413)
    if units and units not in UNITS:
        raise ApplicationError("bad_units", f"Unknown units {units!r}: choose one of {', '.join(UNITS)}.")
    stored = default_storage.save(f"designs/{uuid.uuid4().hex}.bin", ContentFile(data))
    lineage = _lineage(revision_of)
    return Design.objects.create(owner=owner, name=_clean_name(name), sha256=hashlib.sha256(data).hexdigest(),
                                 units=units, stored_name=stored, size_bytes=len(data), parameters=parameters,
                                 revision_of=revision_of, kind=kind, note=note[:300], **lineage)


def stored_bytes(*, owner) -> int:
    """Return how many bytes of designs the user keeps stored."""
    return Design.objects.filter(owner=owner).aggregate(total=Sum("size_bytes"))["total"] or 0


def _over_quota(owner, name: str, size: int, used: int) -> str | None:
    """Return a sentence when storing ``size`` more bytes would take the user past the storage quota."""
    quota = settings.PHASEWRIGHT_STORAGE_QUOTA_BYTES
    if used + size <= quota:
        return None
    return (f"{_clean_name(name)}: not stored; your designs take {size_text(used)} and this file would take them to "
            f"{over_limit_text(used + size, quota).replace(' limit', ' storage quota')}. Delete designs you no "
            "longer need, or ask the lab manager for a larger quota.")


def uploads_check_create(*, owner, uploads: list, printer, material, check_settings: CheckSettings, units: str = "",
                         revision_of: Design | None = None, note: str = "") -> tuple[list[Check], list[str]]:
    """Store and queue each uploaded file that fits the limits; return the checks and a sentence per file refused.

    One rule for a batch: a file is stored only if its check is queued too. Files past the
    active-check cap or the storage quota are refused by name (nothing of them is kept), so the
    user uploads exactly those again later.
    """
    created, refused = [], []
    used = stored_bytes(owner=owner)
    for upload in uploads:
        name, size = _clean_name(upload.name), upload.size
        if problem := _upload_problem(owner, name, size, used, active=len(created)):
            refused.append(problem)
            continue
        try:
            created.append(_store_and_queue(owner=owner, name=upload.name, data=upload.read(), units=units,
                                            revision_of=revision_of, note=note, printer=printer, material=material,
                                            check_settings=check_settings))
            used += size
        except ApplicationError as exc:
            refused.append(exc.message)
    return created, refused


def _upload_problem(owner, name: str, size: int, used: int, active: int) -> str | None:
    """Return why a file of a batch is refused before anything of it is stored, or None."""
    if size > settings.PHASEWRIGHT_MAX_UPLOAD_BYTES:
        return f"{name}: {over_limit_text(size, settings.PHASEWRIGHT_MAX_UPLOAD_BYTES)}."
    waiting = Check.objects.filter(owner=owner, status__in=Check.ACTIVE).count()
    if waiting >= settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS:
        return (f"{name}: not stored; you have {waiting} checks waiting or running, the most at once is "
                f"{settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS}. Upload it again when some have finished.")
    return _over_quota(owner, name, size, used)


def _store_and_queue(*, owner, name: str, data: bytes, printer, material, check_settings, **design) -> Check:
    """Store a design and queue its check, or keep nothing of it (row and file) when the check is refused."""
    with transaction.atomic():
        stored = design_create(owner=owner, name=name, data=data, **design)
        try:
            return check_create(owner=owner, design=stored, printer=printer, material=material,
                                check_settings=check_settings)
        except ApplicationError:
            # Leaving the block with the error rolls the design row back; the file goes by hand.
            default_storage.delete(stored.stored_name)
            raise


def _lineage(revision_of: Design | None) -> dict:
    """Return the family and revision number of a new design (a fresh family without a parent)."""
    if revision_of is None:
        return {}
    latest = Design.objects.filter(family=revision_of.family).order_by("-revision").values_list("revision", flat=True).first()
    return {"family": revision_of.family, "revision": (latest or revision_of.revision) + 1}


def check_create(*, owner, design: Design, printer, material, check_settings: CheckSettings) -> Check:
    """Queue a check of a design; the worker starts only after the row is committed."""
    with transaction.atomic():
        active = Check.objects.filter(owner=owner, status__in=Check.ACTIVE).count()
        if active >= settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS:
            raise ApplicationError("too_many_checks", f"You have {active} checks waiting or running; "
                                   "wait for some to finish before queuing more.", status=429)
        check = Check.objects.create(owner=owner, design=design, printer=printer, material=material,
                                     printer_snapshot=printer.snapshot().to_dict(),
                                     material_snapshot=material.snapshot().to_dict(),
                                     settings=check_settings.to_dict())
        transaction.on_commit(lambda: queue.send_run_check(check.pk))
    return check


def check_claim(*, check_id: int, now=None, retry: bool = False) -> bool:
    """Claim a check for this attempt with one conditional update; False when it is not ours to run.

    A running check is claimable only once its heartbeat is stale: a second delivery of a message
    (Redis visibility timeout, a sweep racing a slow worker) must not start a live check again. A retry of
    the task that holds it (``retry``: the database went away mid-run) takes it back at once: the retry
    replaced the task's only message, so no other run can hold it, while its heartbeat is still fresh.
    """
    now = now or timezone.now()
    stale_before = now - timedelta(seconds=settings.PHASEWRIGHT_STALE_AFTER_S)
    claimable = Q(status=Check.QUEUED) | Q(status=Check.RUNNING, heartbeat_at__lt=stale_before)
    if retry:
        claimable |= Q(status=Check.RUNNING)
    claimed = Check.objects.filter(claimable, pk=check_id, attempts__lt=settings.PHASEWRIGHT_MAX_ATTEMPTS).update(
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


def lab_pairs() -> list[tuple[PrinterProfile, Material]]:
    """Return every active printer with every active material, as the snapshots a check runs against."""
    from webapp.catalogue.selectors import material_list_active, printer_list_active

    materials = [m.snapshot() for m in material_list_active()]
    return [(p.snapshot(), m) for p in printer_list_active() for m in materials]


def check_run(*, check_id: int, retry: bool = False) -> None:
    """Run one check end to end in a worker: claim, read, build the report, store it (``retry``: see check_claim)."""
    if not check_claim(check_id=check_id, retry=retry):
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
                              calibration=calibration_for(check.printer, check.printer_snapshot),
                              alternatives=lab_pairs,  # read only if something blocks
                              concurrent_stages=settings.PHASEWRIGHT_CONCURRENT_STAGES)
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
    if report.part_view:
        path = check.files_prefix() + PART_VIEW_FILE
        if default_storage.exists(path):
            default_storage.delete(path)
        default_storage.save(path, ContentFile(report.part_view.encode()))
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


def check_heartbeat(*, queued_ids, running_ids, now=None) -> None:
    """Stamp the checks a live worker holds: queued ones it has taken, running ones whose heartbeat is still fresh.

    A stale running check is never revived: once stale it belongs to whichever worker claims it next.
    """
    now = now or timezone.now()
    if queued_ids:
        Check.objects.filter(pk__in=list(queued_ids), status=Check.QUEUED).update(heartbeat_at=now)
    if running_ids:
        fresh_after = now - timedelta(seconds=settings.PHASEWRIGHT_STALE_AFTER_S)
        Check.objects.filter(pk__in=list(running_ids), status=Check.RUNNING, heartbeat_at__gte=fresh_after).update(
            heartbeat_at=now)


def check_release_lost(*, check_id: int) -> str:
    """Put a running check whose pool process died back in the queue, or fail it out of attempts; return which."""
    now = timezone.now()
    running = Check.objects.filter(pk=check_id, status=Check.RUNNING)
    if running.filter(attempts__gte=settings.PHASEWRIGHT_MAX_ATTEMPTS).update(
            status=Check.FAILED, error_code="worker_lost", error=worker_lost_sentence(), finished_at=now):
        return "failed"
    if running.update(status=Check.QUEUED, stage="requeued", heartbeat_at=None):
        return "requeued"
    return ""


def check_requeue_stale(*, now=None, stale_after_s: int | None = None,
                        pending_ids: set[int] | None = None) -> tuple[int, int]:
    """Requeue checks whose worker went silent; fail those out of attempts. Return (requeued, failed).

    A running check with a stale heartbeat lost its worker. A queued check may have lost its message: a folder
    broker deletes a message when a worker takes it, and a worker killed before it stamps the check leaves no
    trace. ``pending_ids`` are the checks whose messages still wait in the broker (the folder broker can list
    them): a queued check that is neither waiting there nor freshly stamped is resent, and stamped so that it is
    resent at most once per stale age. Without that list (Redis keeps a taken message until it is acknowledged),
    a queued check with a stale stamp is resent, and one no worker ever took is resent once, late, in case a
    broker without persistence lost it.
    """
    now = now or timezone.now()
    stale_before = now - timedelta(seconds=stale_after_s or settings.PHASEWRIGHT_STALE_AFTER_S)
    stale = Check.objects.filter(status=Check.RUNNING, heartbeat_at__lt=stale_before)
    failed = stale.filter(attempts__gte=settings.PHASEWRIGHT_MAX_ATTEMPTS).update(
        status=Check.FAILED, error_code="worker_lost", finished_at=now, error=worker_lost_sentence())
    resend = []
    for check in stale.filter(attempts__lt=settings.PHASEWRIGHT_MAX_ATTEMPTS):
        if Check.objects.filter(pk=check.pk, status=Check.RUNNING, heartbeat_at=check.heartbeat_at).update(
                status=Check.QUEUED, stage="requeued", heartbeat_at=None):
            resend.append(check.pk)
    if pending_ids is not None:
        silent = Check.objects.filter(Q(heartbeat_at__isnull=True) | Q(heartbeat_at__lt=stale_before),
                                      status=Check.QUEUED).exclude(pk__in=[*pending_ids, *resend])
        for check in silent:
            if Check.objects.filter(pk=check.pk, status=Check.QUEUED, heartbeat_at=check.heartbeat_at).update(
                    heartbeat_at=now):
                resend.append(check.pk)
    else:
        for check in Check.objects.filter(status=Check.QUEUED, heartbeat_at__lt=stale_before):
            if Check.objects.filter(pk=check.pk, status=Check.QUEUED, heartbeat_at=check.heartbeat_at).update(
                    heartbeat_at=None):
                resend.append(check.pk)
        # Stage "waiting" marks the one late resend (and reads naturally on the page), so it is not repeated.
        never_taken_before = now - timedelta(seconds=2 * settings.CELERY_TASK_SOFT_TIME_LIMIT)
        for check in Check.objects.filter(status=Check.QUEUED, heartbeat_at__isnull=True,
                                          created_at__lt=never_taken_before).exclude(stage="waiting").exclude(
                                              pk__in=resend):
            if Check.objects.filter(pk=check.pk, status=Check.QUEUED, heartbeat_at__isnull=True).update(
                    stage="waiting"):
                resend.append(check.pk)
    for pk in resend:
        transaction.on_commit(lambda pk=pk: queue.send_run_check(pk))
    return len(resend), failed


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


def check_pdf(*, check: Check, site_root: str | None = None) -> bytes:
    """Return the report as a PDF linking back to the site at site_root, drawn once per address and then kept.

    site_root is the address the reader used (from the request); without one, the configured SITE_ROOT.
    """
    from services.render.pdf import report_pdf

    link = f"{(site_root or settings.SITE_ROOT).rstrip('/')}/checks/{check.public_id}/"
    path = check.files_prefix() + f"report-{hashlib.sha256(link.encode()).hexdigest()[:12]}.pdf"
    if default_storage.exists(path):
        with default_storage.open(path, "rb") as fh:
            return fh.read()
    pdf = report_pdf(check.report, check_figures(check=check), checked_at=check.finished_at or timezone.now(), link=link)
    default_storage.save(path, ContentFile(pdf))
    return pdf
