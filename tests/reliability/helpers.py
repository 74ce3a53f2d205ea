"""Parts, submission and inspection helpers for the reliability tests."""

from __future__ import annotations

import io
import os
import signal

import trimesh
from django.core.files.storage import default_storage

from services.report import EXTRA_FILES
from services.settings import CheckSettings, OpticsSettings
from tests.webapp.parts import box_stl
from webapp.checks import services
from webapp.checks.models import Check

__all__ = ["box_stl", "sphere_stl", "submit", "child_pids", "kill_group", "stored_report_files", "assert_one_report"]

# One design frequency keeps a small part's optics quick.
QUICK = CheckSettings(quantities=(1,), optics=OpticsSettings(freqs_ghz=(140.0,)))


def sphere_stl(radius_mm: float, subdivisions: int = 3) -> bytes:
    """Return a binary STL of a ball resting on z = 0: every layer differs, so it takes a few seconds."""
    mesh = trimesh.creation.icosphere(subdivisions=subdivisions, radius=radius_mm)
    mesh.apply_translation((0, 0, radius_mm))
    buf = io.BytesIO()
    mesh.export(buf, file_type="stl")
    return buf.getvalue()


def submit(owner, data: bytes, name: str, check_settings: CheckSettings = QUICK) -> Check:
    """Store a design and queue its check the way the upload page does (enqueued once committed)."""
    from webapp.catalogue.models import Material, Printer

    design = services.design_create(owner=owner, name=name, data=data, units="mm")
    return services.check_create(owner=owner, design=design, printer=Printer.objects.get(slug="bay1-lcd-resin"),
                                 material=Material.objects.get(slug="standard-resin"), check_settings=check_settings)


def child_pids(pid: int) -> list[int]:
    """Return the pids of a process's children (the worker's pool processes)."""
    found = []
    for task in os.listdir(f"/proc/{pid}/task"):
        with open(f"/proc/{pid}/task/{task}/children") as fh:
            found += [int(p) for p in fh.read().split()]
    return found


def kill_group(proc) -> None:
    """SIGKILL a worker's whole process group (main process and children): the machine died."""
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=20)


def stored_report_files(check: Check) -> list[str]:
    """Return the names of the files stored for a check's report."""
    if not default_storage.exists(check.files_prefix().rstrip("/")):
        return []
    return sorted(default_storage.listdir(check.files_prefix())[1])


def assert_one_report(check: Check) -> None:
    """The check is done with one report: one row, and exactly the named files (no suffixed copies)."""
    check.refresh_from_db()
    assert check.status == "done", (check.status, check.error)
    assert Check.objects.filter(pk=check.pk, report__isnull=False).count() == 1
    files = set(stored_report_files(check))
    assert set(check.report["figures"]) <= files, files
    # Any other name is a second copy: Django's storage renames a file whose name is taken.
    # The PDF is kept once per site address it links to (report-<hash of the address>.pdf).
    pdfs = {name for name in files if name.startswith("report-") and name.endswith(".pdf")}
    assert not files - set(check.report["figures"]) - set(EXTRA_FILES) - pdfs, files
