"""Read side of the catalogue: entries, their history, print logs and the calibration they give."""

from __future__ import annotations

import hashlib
import json

from django.shortcuts import get_object_or_404

from services.estimate.calibration import Calibration, fit_calibration
from webapp.accounts.roles import is_lab_manager
from webapp.catalogue.models import Material, Printer, PrintLog
from webapp.checks.models import Check


def printer_list_active():
    return Printer.objects.filter(retired=False)


def material_list_active():
    return Material.objects.filter(retired=False)


def printer_list():
    """Return every printer profile, the retired ones last."""
    return Printer.objects.order_by("retired", "name")


def material_list():
    """Return every material, the retired ones last."""
    return Material.objects.order_by("retired", "name")


def printer_get(*, slug: str) -> Printer:
    return get_object_or_404(Printer, slug=slug)


def material_get(*, slug: str) -> Material:
    return get_object_or_404(Material, slug=slug)


def catalogue_changed_since(check) -> list[str]:
    """Return a sentence for each of the check's printer and material that changed since it ran."""
    notes = []
    for entry, snapshot in ((check.printer, check.printer_snapshot), (check.material, check.material_snapshot)):
        used = snapshot.get("version", 1)
        if entry.version != used:
            notes.append(f"{entry.name} is now at version {entry.version}; this report used version {used}.")
        if entry.retired:
            notes.append(f"{entry.name} has been retired: new checks cannot choose it.")
    return notes


def changes_between(old: dict, new: dict) -> list[tuple[str, object, object]]:
    """Return (path, old value, new value) for every value that differs, paths like 'rules.min_gap.xy_mm'."""
    flat_old, flat_new = _flatten(old), _flatten(new)
    skip = {"version"}
    return [(path, flat_old.get(path), flat_new.get(path)) for path in sorted(set(flat_old) | set(flat_new))
            if path not in skip and flat_old.get(path) != flat_new.get(path)]


def _flatten(data, prefix: str = "") -> dict:
    if isinstance(data, list) and data and all(isinstance(row, dict) and "freq_ghz" in row for row in data):
        # RF rows are known by their frequency, so adding a row does not read as every later row changing.
        data = {f"{row['freq_ghz']:g} GHz": {k: v for k, v in row.items() if k != "freq_ghz"} for row in data}
    if isinstance(data, dict):
        flat = {}
        for key, value in data.items():
            flat.update(_flatten(value, f"{prefix}{key}."))
        return flat
    return {prefix[:-1]: data}


def version_history(entry) -> list[dict]:
    """Return the entry's versions, newest first, each with what it changed from the one before."""
    versions = list(entry.versions.select_related("created_by").order_by("version"))
    rows, previous = [], None
    for v in versions:
        changes = changes_between(previous.data, v.data) if previous else []
        rows.append({"version": v, "changes": changes})
        previous = v
    return rows[::-1]


def time_model_key(snapshot: dict) -> str:
    """Return a short key of the time model a profile snapshot estimates with (equal models, equal keys)."""
    def numeric(value):
        # 6 and 6.0 are the same constant, whether it came from a data file or a form.
        return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else value

    model = {"technology": snapshot.get("technology"),
             "time_model": {k: numeric(v) for k, v in (snapshot.get("time_model") or {}).items()}}
    return hashlib.sha256(json.dumps(model, sort_keys=True).encode()).hexdigest()[:16]


def calibration_for(printer: Printer, snapshot: dict | None = None) -> Calibration:
    """Return the printer's print-time correction, fitted over its successful logged prints.

    Only prints estimated with the same time model as ``snapshot`` (the printer's current data by
    default) count: once the lab manager changes the model's constants, older logs no longer say
    how far off it is.
    """
    pairs = calibration_logs(printer, snapshot).values_list("model_print_time_s", "actual_print_time_s")
    return fit_calibration([tuple(p) for p in pairs])


def calibration_logs(printer: Printer, snapshot: dict | None = None):
    """Return the logs a printer's calibration rests on."""
    key = time_model_key(snapshot if snapshot is not None else printer.data)
    return PrintLog.objects.filter(logged_check__printer=printer, succeeded=True, time_model_key=key)


def calibration_table() -> list[dict]:
    """Return, per printer, its calibration and how many of its logs it leaves out (older models, failures)."""
    rows = []
    for printer in printer_list():
        total = PrintLog.objects.filter(logged_check__printer=printer).count()
        calibration = calibration_for(printer)
        rows.append({"printer": printer, "calibration": calibration, "logs": total,
                     "not_counted": total - calibration.count})
    return rows


def print_log_list_for(*, user):
    """Return the logs a user may see: all for a lab manager, otherwise those of the user's own checks."""
    logs = PrintLog.objects.select_related("logged_check__design", "logged_check__printer", "logged_by")
    return logs if is_lab_manager(user) else logs.filter(logged_check__owner=user)


def with_counted(logs) -> list[PrintLog]:
    """Return the logs, each marked ``counted`` when its printer's calibration rests on it."""
    keys: dict[int, str] = {}
    rows = list(logs)
    for log in rows:
        printer = log.logged_check.printer
        key = keys.setdefault(printer.pk, time_model_key(printer.data))
        log.counted = log.succeeded and log.time_model_key == key
    return rows


def checks_to_log_for(*, user):
    """Return finished checks whose print the user may log and nobody has logged yet, newest first."""
    checks = Check.objects.filter(status=Check.DONE, print_logs__isnull=True).select_related("design", "owner")
    return (checks if is_lab_manager(user) else checks.filter(owner=user)).order_by("-finished_at")


def print_log_get_for(*, user, public_id) -> PrintLog:
    return get_object_or_404(print_log_list_for(user=user), public_id=public_id)


def check_for_logging(*, user, public_id):
    """Return a check whose print the user may log: their own, or any for a lab manager (else 404)."""
    checks = Check.objects.select_related("design", "printer", "material")
    if not is_lab_manager(user):
        checks = checks.filter(owner=user)
    return get_object_or_404(checks, public_id=public_id)


def print_log_list_for_check(*, user, check):
    """Return the logged prints of one check that the user may see (for the check's page)."""
    return print_log_list_for(user=user).filter(logged_check=check)
