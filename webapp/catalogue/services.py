"""Write side of the catalogue: create, edit (a new version each time) and retire profiles and
materials, seed the starter data, and log finished prints."""

from __future__ import annotations

import math
import re

from django.core.exceptions import PermissionDenied
from django.db import transaction
from django.utils import timezone

from services import catalogue as starter
from services.errors import UnusableInput
from services.estimate.time_models import format_duration
from services.optics.material_fit import MaterialFit, fit_material, merge_measured, read_sample
from services.profiles import Material as MaterialSnapshot
from services.profiles import PrinterProfile
from webapp.accounts.roles import is_lab_manager
from webapp.catalogue.models import Material, MaterialVersion, Printer, PrinterVersion, PrintLog
from webapp.catalogue.selectors import changes_between, time_model_key
from webapp.catalogue.validation import Problem, material_problems, printer_problems


# A logged time this many times off the check's estimate (either way) is refused as a typo
# (engineering judgement [R]: time models are off by tens of per cent, not by twenty times).
MAX_LOG_RATIO = 20.0

SLUG = re.compile(r"[a-z0-9]+(?:-[a-z0-9]+)*")


class CatalogueInvalid(Exception):
    """Data a lab manager must correct; ``problems`` pairs a value's path (or None) with a sentence."""

    def __init__(self, problems: list[Problem]) -> None:
        super().__init__(" ".join(message for _, message in problems))
        self.problems = problems


# Entry model -> (snapshot class, its explaining checks, its version model).
_KINDS = {Printer: (PrinterProfile, printer_problems, PrinterVersion),
          Material: (MaterialSnapshot, material_problems, MaterialVersion)}


def _normalised(model, *, slug: str, name: str, data: dict, version: int) -> dict:
    """Return the data as its snapshot writes it, or raise CatalogueInvalid with every problem found."""
    snapshot_cls, problems_of, _ = _KINDS[model]
    data = {**data, "slug": slug, "name": name.strip(), "version": version}
    problems = ([] if data["name"] else [("name", "Give it a name people will recognise in a report.")])
    problems += problems_of(data) + _currency_problems(model, data, slug)
    if problems:
        raise CatalogueInvalid(problems)
    try:
        return snapshot_cls.from_dict(data).to_dict()
    except UnusableInput as exc:
        raise CatalogueInvalid([(None, exc.message)]) from exc
    except (TypeError, ValueError, KeyError) as exc:
        raise CatalogueInvalid([(None, f"A value is missing or of the wrong type ({exc}); "
                                       "check the advanced JSON.")]) from exc


def _currency_problems(model, data: dict, slug: str) -> list[Problem]:
    """Refuse a currency the other side of a pairing does not use: a quote cannot add them up."""
    if model is Printer:
        currency, path, verb = (data.get("cost") or {}).get("currency"), "cost.currency", "are priced in"
        others = {m.name: m.data.get("currency") for m in Material.objects.filter(retired=False)
                  if data.get("process") in m.data.get("processes", ())}
    else:
        currency, path, verb = data.get("currency"), "currency", "charge in"
        others = {p.name: (p.data.get("cost") or {}).get("currency") for p in Printer.objects.filter(retired=False)
                  if p.data.get("process") in (data.get("processes") or ())}
    if not currency:
        return [(path, "Give the currency, e.g. EUR.")]
    differ = {name: theirs for name, theirs in others.items() if theirs != currency}
    if not differ:
        return []
    names = ", ".join(list(differ)[:3]) + (" and others" if len(differ) > 3 else "")
    theirs = sorted(set(differ.values()))
    return [(path, f"{names} {verb} {', '.join(theirs)}; a quote cannot mix currencies, so use "
                   f"{theirs[0]} here or change those first.")]


def _entry_create(model, *, user, slug: str, name: str, data: dict, note: str = ""):
    if not SLUG.fullmatch(slug or ""):
        raise CatalogueInvalid([("slug", "Use lower-case letters, digits and hyphens for the short name, e.g. bay4-resin.")])
    if model.objects.filter(slug=slug).exists():
        raise CatalogueInvalid([("slug", f"The short name {slug!r} is taken already; choose another.")])
    clean = _normalised(model, slug=slug, name=name, data=data, version=1)
    with transaction.atomic():
        entry = model.objects.create(slug=slug, name=clean["name"], data=clean, version=1)
        entry.versions.create(version=1, data=clean, note=note or "created", created_by=user)
    return entry


def _entry_update(model, *, user, entry, data: dict, note: str = "", base_version: int | None = None):
    """Save the data as the next version, keeping every earlier one; unchanged data makes no version."""
    with transaction.atomic():
        locked = model.objects.select_for_update().get(pk=entry.pk)
        if base_version is not None and locked.version != base_version:
            raise CatalogueInvalid([(None, f"Someone saved version {locked.version} while you were editing "
                                           f"version {base_version}; reload the page to start from theirs.")])
        clean = _normalised(model, slug=locked.slug, name=data.get("name", locked.name), data=data,
                            version=locked.version + 1)
        if not changes_between(locked.data, clean):
            return locked
        _keep_current_version(locked)
        locked.data, locked.name, locked.version = clean, clean["name"], clean["version"]
        locked.save(update_fields=["data", "name", "version", "updated_at"])
        locked.versions.create(version=locked.version, data=clean, note=note, created_by=user)
    return locked


def _keep_current_version(entry) -> None:
    """Record the current data as its version if it has no record yet (entries made before versioning)."""
    entry.versions.get_or_create(version=entry.version, defaults={"data": {**entry.data, "version": entry.version},
                                                                  "note": "as found before versioning"})


def _entry_retire(model, *, user, entry, retired: bool = True):
    """Retire (or bring back) an entry: new checks cannot choose it, old reports keep it."""
    model.objects.filter(pk=entry.pk).update(retired=retired)
    entry.refresh_from_db()
    return entry


def printer_create(*, user, slug: str, name: str, data: dict, note: str = "") -> Printer:
    """Create a printer profile at version 1, refusing data that would make checks wrong."""
    return _entry_create(Printer, user=user, slug=slug, name=name, data=data, note=note)


def printer_update(*, user, printer: Printer, data: dict, note: str = "", base_version: int | None = None) -> Printer:
    """Save edited profile data as a new version; earlier versions and old reports keep theirs."""
    return _entry_update(Printer, user=user, entry=printer, data=data, note=note, base_version=base_version)


def printer_retire(*, user, printer: Printer, retired: bool = True) -> Printer:
    """Retire a printer profile (or bring it back); checks that used it keep it."""
    return _entry_retire(Printer, user=user, entry=printer, retired=retired)


def material_create(*, user, slug: str, name: str, data: dict, note: str = "") -> Material:
    """Create a material at version 1, refusing data that would make checks wrong."""
    return _entry_create(Material, user=user, slug=slug, name=name, data=data, note=note)


def material_update(*, user, material: Material, data: dict, note: str = "",
                    base_version: int | None = None) -> Material:
    """Save edited material data as a new version; earlier versions and old reports keep theirs."""
    return _entry_update(Material, user=user, entry=material, data=data, note=note, base_version=base_version)


def material_fit(pairs: list[tuple[str, bytes, float]]) -> MaterialFit:
    """Fit eps_r and tan delta to (file name, .s2p bytes, thickness mm) of flat samples; UnusableInput when unusable."""
    return fit_material([read_sample(name, data, thickness) for name, data, thickness in pairs])


def material_save_measured(*, user, material: Material, rows: list[dict], band_ghz: list[float], files: list[str],
                           base_version: int) -> Material:
    """Save measured RF rows as the material's next version, replacing earlier rows inside the measured band."""
    data = {**material.data, "rf": merge_measured(material.data.get("rf") or [], rows, tuple(band_ghz))}
    note = f"RF data measured from {', '.join(files)}, {band_ghz[0]:g}-{band_ghz[1]:g} GHz"
    return material_update(user=user, material=material, data=data, note=note[:300], base_version=base_version)


def material_retire(*, user, material: Material, retired: bool = True) -> Material:
    """Retire a material (or bring it back); checks that used it keep it."""
    return _entry_retire(Material, user=user, entry=material, retired=retired)


STARTER_NOTE = "starter catalogue"
STARTER_UPDATE_NOTE = "starter catalogue updated (the entry had never been edited)"


@transaction.atomic
def catalogue_seed() -> tuple[int, int]:
    """Create the starter printers and materials that are missing, and bring never-edited ones up to date.

    Return how many were added. An entry still at the starter's own first version takes the current
    starter data as its next version (old reports keep their snapshots); one a lab has edited is left alone.
    """
    added = [0, 0]
    for i, (model, items) in enumerate(((Printer, starter.printers()), (Material, starter.materials()))):
        for item in items:
            data = item.to_dict()
            entry, created = model.objects.get_or_create(slug=item.slug, defaults={"name": item.name, "data": data})
            if created:
                entry.versions.create(version=entry.version, data=data, note=STARTER_NOTE)
            elif _never_edited(entry):
                _entry_update(model, user=None, entry=entry, data=data, note=STARTER_UPDATE_NOTE)
            added[i] += created
    return added[0], added[1]


def _never_edited(entry) -> bool:
    notes = list(entry.versions.values_list("note", flat=True))
    return bool(notes) and all(n in (STARTER_NOTE, STARTER_UPDATE_NOTE) for n in notes)


def print_log_create(*, user, check, actual_print_time_s: float, succeeded: bool, actual_material_ml: float | None = None,
                     failure_reason: str = "", copies: int = 1) -> PrintLog:
    """Log a finished print of a checked part, copying the check's estimate beside what really happened."""
    estimate = (check.report or {}).get("estimate")
    if check.status != check.DONE or not estimate:
        raise CatalogueInvalid([(None, "This check has no estimate to compare with; log the print once its "
                                       "report is ready.")])
    problems = _print_log_problems(actual_print_time_s, actual_material_ml, succeeded, failure_reason, copies)
    if problems:
        raise CatalogueInvalid(problems)
    estimated_s, estimated_ml = _estimate_for(estimate, copies)
    if problem := _far_from_estimate(actual_print_time_s, estimated_s):
        raise CatalogueInvalid([problem])
    calibration = estimate.get("calibration") or {}
    factor = float(calibration.get("factor") or 1.0) if estimate.get("calibrated") else 1.0
    # A lab manager's log counts at once; a designer's waits for one, so nobody moves every user's quotes alone.
    accepted = {"accepted_at": timezone.now(), "accepted_by": user} if is_lab_manager(user) else {}
    return PrintLog.objects.create(
        logged_check=check, logged_by=user, copies=copies, actual_print_time_s=actual_print_time_s,
        actual_material_ml=actual_material_ml, succeeded=succeeded, failure_reason=failure_reason.strip(),
        estimated_print_time_s=estimated_s, model_print_time_s=estimated_s / factor,
        estimated_material_ml=estimated_ml, time_model_key=time_model_key(check.printer_snapshot), **accepted)


def _far_from_estimate(actual_s: float, estimated_s: float) -> Problem | None:
    """Refuse a time more than MAX_LOG_RATIO times off the estimate: a typo far likelier than such a print."""
    if not (math.isfinite(estimated_s) and estimated_s > 0):
        return (None, "This check's estimate has no print time to compare with, so a print of it cannot calibrate "
                      "anything; check the design again and log the print against the new check.")
    if 1 / MAX_LOG_RATIO <= actual_s / estimated_s <= MAX_LOG_RATIO:
        return None
    return ("actual_print_time_s",
            f"{format_duration(actual_s)} is more than {MAX_LOG_RATIO:g} times off the estimate of "
            f"{format_duration(estimated_s)}; check the time entered (h:mm, or minutes). If the print really "
            "took that long, tell the lab manager: the printer's time model needs a look, not a calibration.")


def print_log_accept(*, user, log: PrintLog) -> PrintLog:
    """Accept a designer's log into the printer's calibration (lab managers only)."""
    if not is_lab_manager(user):
        raise PermissionDenied("Only a lab manager can accept print logs into the calibration.")
    if log.accepted_at is None:
        PrintLog.objects.filter(pk=log.pk, accepted_at__isnull=True).update(accepted_at=timezone.now(), accepted_by=user)
        log.refresh_from_db()
    return log


def _print_log_problems(time_s, material_ml, succeeded, reason, copies) -> list[Problem]:
    problems: list[Problem] = []
    if not (math.isfinite(time_s) and time_s > 0):
        problems.append(("actual_print_time_s", "Enter how long the print took, from start to the end (or to the "
                                                "failure), as a number of seconds above 0."))
    if material_ml is not None and not (math.isfinite(material_ml) and material_ml >= 0):
        problems.append(("actual_material_ml", "The material used must be a number of ml, 0 or more; leave it "
                                               "blank if not measured."))
    if not succeeded and not reason.strip():
        problems.append(("failure_reason", "Say why the print failed (e.g. 'peeled off the plate at layer 120'), "
                                           "so the next print can avoid it."))
    if copies < 1:
        problems.append(("copies", "A build holds at least one copy of the part."))
    return problems


def _estimate_for(estimate: dict, copies: int) -> tuple[float, float]:
    """Return the report's print time (s) and material (ml) for one build of ``copies`` parts."""
    if copies == 1:
        return float(estimate["print_time_s"]), float(estimate["material_ml"])
    rows = [q for q in estimate.get("quantities", ()) if q["quantity"] == copies and q["builds"] == 1]
    if not rows:
        known = ", ".join(str(q["quantity"]) for q in estimate.get("quantities", ()) if q["builds"] == 1) or "1"
        raise CatalogueInvalid([("copies", f"The report estimates one build of {known} part{'' if known == '1' else 's'}, not of {copies}; "
                                           f"log one of those, or check the design again with {copies} among the quantities.")])
    return float(rows[0]["print_time_s"]), copies * float(estimate["material_ml"])


def print_log_delete(*, log: PrintLog) -> None:
    """Delete a log entered by mistake; the calibration refits without it."""
    log.delete()
