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
    """Return the printer's print-time correction, fitted over its accepted successful logged prints.

    Only prints estimated with the same time model as ``snapshot`` (the printer's current data by
    default) count: once the lab manager changes the model's constants, older logs no longer say
    how far off it is.
    """
    return calibration_fit(printer, snapshot)[0]


def calibration_fit(printer: Printer, snapshot: dict | None = None) -> tuple[Calibration, list[dict]]:
    """Return the printer's calibration and the points it was fitted on, each with its log and outlier reason."""
    rows = list(calibration_logs(printer, snapshot).order_by("created_at", "id").values_list(
        "id", "model_print_time_s", "actual_print_time_s"))
    calibration = fit_calibration([(estimated, actual) for _, estimated, actual in rows])
    reasons = {rows[o.index][0]: o.reason for o in calibration.outliers}
    points = [{"log_id": pk, "estimated_s": estimated, "actual_s": actual, "outlier": reasons.get(pk)}
              for pk, estimated, actual in rows]
    return calibration, points


def calibration_logs(printer: Printer, snapshot: dict | None = None):
    """Return the logs a printer's calibration rests on: successful, accepted, with the same time model."""
    key = time_model_key(snapshot if snapshot is not None else printer.data)
    return PrintLog.objects.filter(logged_check__printer=printer, succeeded=True, time_model_key=key,
                                   accepted_at__isnull=False)


def calibration_table() -> list[dict]:
    """Return, per printer, its calibration, its outliers and how many of its logs it leaves out."""
    rows = []
    for printer in printer_list():
        total = PrintLog.objects.filter(logged_check__printer=printer).count()
        waiting = PrintLog.objects.filter(logged_check__printer=printer, succeeded=True, accepted_at__isnull=True).count()
        calibration, points = calibration_fit(printer)
        rows.append({"printer": printer, "calibration": calibration, "logs": total, "waiting": waiting,
                     "not_counted": total - calibration.count, "points": points})
    return rows


def print_log_list_for(*, user, printer: str = ""):
    """Return the logs a user may see (all for a lab manager, else those of their own checks), on one printer if given."""
    logs = PrintLog.objects.select_related("logged_check__design", "logged_check__printer", "logged_by", "accepted_by")
    if printer:
        logs = logs.filter(logged_check__printer__slug=printer)
    return logs if is_lab_manager(user) else logs.filter(logged_check__owner=user)


def with_counted(logs) -> list[PrintLog]:
    """Return the logs, each marked ``counted`` when its printer's calibration rests on it, else ``why_not``."""
    fits: dict[int, tuple[str, set, dict]] = {}
    rows = list(logs)
    for log in rows:
        printer = log.logged_check.printer
        if printer.pk not in fits:
            _, points = calibration_fit(printer)
            fits[printer.pk] = (time_model_key(printer.data), {p["log_id"] for p in points},
                                {p["log_id"]: p["outlier"] for p in points if p["outlier"]})
        key, fitted, outliers = fits[printer.pk]
        log.outlier_reason = outliers.get(log.pk)
        log.why_not = _why_not_counted(log, key, fitted)
        log.counted = log.why_not is None
    return rows


def _why_not_counted(log: PrintLog, key: str, fitted: set) -> str | None:
    if not log.succeeded:
        return "failed print"
    if log.time_model_key != key:
        return "older time model"
    if not log.usable:
        return "unusable times (stored before they were checked)"
    if log.accepted_at is None:
        return "waiting for a lab manager to accept it"
    if log.pk not in fitted:
        return "not in the fit"
    return "outlier: " + log.outlier_reason if log.outlier_reason else None


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
