"""The lab manager's pages (printers, materials, prices) and the print logs.

Everyone signed in reads the catalogue; only a lab manager changes it (403 for anyone else).
Print logs belong to the check's owner and to lab managers; a stranger gets a 404.
"""

from __future__ import annotations

import base64
from dataclasses import dataclass
from functools import wraps

from django.contrib import messages
from django.core import signing
from django.http import Http404, HttpResponse
from django.utils import timezone
from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.shortcuts import redirect, render
from django.urls import reverse
from django.utils.http import urlencode
from django.views.decorators.http import require_POST

from services.errors import UnusableInput
from services.estimate.calibration import MIN_LOGS
from services.optics.material_figures import material_fit_png, material_rf_png as rf_png
from services.profiles import Material as MaterialSnapshot
from webapp.accounts.roles import is_lab_manager
from webapp.catalogue import selectors, services
from webapp.catalogue.forms import MaterialForm, MeasureForm, PrinterForm, PrintLogForm
from webapp.catalogue.plots import calibration_scatter

MEASURE_SALT = "catalogue.material_measure"
MEASURE_MAX_AGE_S = 3600


@dataclass(frozen=True)
class Kind:
    """What differs between the printer and the material pages."""

    name: str
    title: str
    form: type
    entries: object
    get: object
    create: object
    update: object
    retire: object


KINDS = {
    "printer": Kind("printer", "printer profile", PrinterForm, selectors.printer_list, selectors.printer_get,
                    services.printer_create,
                    lambda entry, **kw: services.printer_update(printer=entry, **kw),
                    lambda entry, **kw: services.printer_retire(printer=entry, **kw)),
    "material": Kind("material", "material", MaterialForm, selectors.material_list, selectors.material_get,
                     services.material_create,
                     lambda entry, **kw: services.material_update(material=entry, **kw),
                     lambda entry, **kw: services.material_retire(material=entry, **kw)),
}


def lab_manager_required(view):
    """Let only lab managers through: a designer gets 403 (the page exists, the right does not)."""
    @wraps(view)
    @login_required
    def wrapper(request, *args, **kwargs):
        if not is_lab_manager(request.user):
            raise PermissionDenied("Only a lab manager can change printers, materials and prices.")
        return view(request, *args, **kwargs)
    return wrapper


@login_required
def entry_list(request, kind: str):
    k = KINDS[kind]
    entries = list(k.entries())
    if kind == "printer":
        calibrations = {row["printer"].pk: row for row in selectors.calibration_table()}
        for entry in entries:
            entry.calibration_row = calibrations.get(entry.pk)
    return render(request, f"catalogue/{kind}_list.html", {"kind": k, "entries": entries})


@login_required
def entry_detail(request, kind: str, slug: str):
    k = KINDS[kind]
    entry = k.get(slug=slug)
    context = {"kind": k, "entry": entry, "data": entry.data, "history": selectors.version_history(entry),
               "checks_count": entry.checks.count()}
    if kind == "printer":
        calibration, points = selectors.calibration_fit(entry)
        context.update(calibration=calibration, points=points,
                       scatter=calibration_scatter(points, calibration.factor, calibration.applies))
    return render(request, f"catalogue/{kind}_detail.html", context)


@lab_manager_required
def entry_create(request, kind: str):
    k = KINDS[kind]
    source = request.GET.get("from")
    base = {**k.get(slug=source).data, "slug": "", "version": None} if source else {}
    form = k.form(request.POST or None, base=base, creating=True)
    if request.method == "POST" and form.is_valid():
        try:
            data = form.to_data()
            entry = k.create(user=request.user, slug=form.cleaned_data["slug"], name=data["name"], data=data,
                             note=form.cleaned_data["note"])
        except services.CatalogueInvalid as exc:
            form.add_problems(exc.problems)
        else:
            messages.success(request, f"{entry.name} created at version 1.")
            return redirect(f"catalogue:{kind}_detail", slug=entry.slug)
    return render(request, "catalogue/entry_form.html", {"kind": k, "form": form, "source": source},
                  status=400 if form.errors else 200)


@lab_manager_required
def entry_edit(request, kind: str, slug: str):
    k = KINDS[kind]
    entry = k.get(slug=slug)
    form = k.form(request.POST or None, base=entry.data, creating=False)
    if request.method == "POST" and form.is_valid():
        try:
            saved = k.update(entry, user=request.user, data=form.to_data(), note=form.cleaned_data["note"],
                             base_version=form.cleaned_data["base_version"])
        except services.CatalogueInvalid as exc:
            form.add_problems(exc.problems)
        else:
            messages.success(request, f"{saved.name} saved as version {saved.version}." if saved.version != entry.version
                             else f"Nothing changed: {saved.name} stays at version {saved.version}.")
            return redirect(f"catalogue:{kind}_detail", slug=saved.slug)
    return render(request, "catalogue/entry_form.html", {"kind": k, "form": form, "entry": entry},
                  status=400 if form.errors else 200)


@lab_manager_required
def entry_retire(request, kind: str, slug: str):
    k = KINDS[kind]
    entry = k.get(slug=slug)
    if request.method == "POST":
        retired = request.POST.get("action") != "reinstate"
        k.retire(entry, user=request.user, retired=retired)
        messages.success(request, f"{entry.name} {'retired: new checks cannot choose it' if retired else 'is back in use'}.")
        return redirect(f"catalogue:{kind}_detail", slug=entry.slug)
    return render(request, "catalogue/entry_retire.html", {"kind": k, "entry": entry, "checks_count": entry.checks.count()})


@login_required
def material_rf_png(request, slug: str):
    entry = selectors.material_get(slug=slug)
    snapshot = MaterialSnapshot.from_dict(entry.data)
    if not snapshot.rf:
        raise Http404("This material has no RF data to plot.")
    return HttpResponse(rf_png(snapshot), content_type="image/png")


@lab_manager_required
def material_measure(request, slug: str):
    entry = selectors.material_get(slug=slug)
    if request.method == "POST" and request.POST.get("action") == "save":
        return _save_measured(request, entry)
    form = MeasureForm(request.POST or None, request.FILES or None)
    context = {"entry": entry, "form": form}
    if request.method == "POST" and form.is_valid():
        pairs = form.cleaned_data["pairs"]
        try:
            fit = services.material_fit(pairs)
        except UnusableInput as exc:
            form.add_error(None, exc.message)
        else:
            files = [name for name, _, _ in pairs]
            source = f"measured by {form.cleaned_data['lab']}, {timezone.now().date().isoformat()}, {', '.join(files)}"
            rows = fit.rf_points(source)
            band = [float(fit.freqs_ghz[0]), float(fit.freqs_ghz[-1])]
            context.update(fit=fit, rows=rows, band=band, plot=base64.b64encode(material_fit_png(fit)).decode(),
                           payload=signing.dumps({"rows": rows, "band": band, "files": files, "version": entry.version},
                                                 salt=MEASURE_SALT))
    return render(request, "catalogue/material_measure.html", context, status=400 if form.errors else 200)


def _save_measured(request, entry):
    try:
        payload = signing.loads(request.POST.get("payload", ""), salt=MEASURE_SALT, max_age=MEASURE_MAX_AGE_S)
    except signing.BadSignature:
        messages.error(request, "That fit is more than an hour old or was altered; upload the files again.")
        return redirect("catalogue:material_measure", slug=entry.slug)
    try:
        saved = services.material_save_measured(user=request.user, material=entry, rows=payload["rows"],
                                                band_ghz=payload["band"], files=payload["files"],
                                                base_version=payload["version"])
    except services.CatalogueInvalid as exc:
        messages.error(request, str(exc))
        return redirect("catalogue:material_measure", slug=entry.slug)
    messages.success(request, f"{saved.name} saved as version {saved.version} with the measured RF data.")
    return redirect("catalogue:material_detail", slug=saved.slug)


@login_required
def log_list(request):
    printer = request.GET.get("printer") or ""
    logs = selectors.print_log_list_for(user=request.user, printer=printer)
    calibrations = [row for row in selectors.calibration_table() if not printer or row["printer"].slug == printer]
    for row in calibrations:
        row["scatter"] = calibration_scatter(row["points"], row["calibration"].factor, row["calibration"].applies)
    return render(request, "catalogue/log_list.html", {
        "logs": selectors.with_counted(logs[:300]), "printer": printer, "printers": selectors.printer_list(),
        "calibrations": calibrations, "min_logs": MIN_LOGS, "loggable": selectors.checks_to_log_for(user=request.user)[:15]})


@login_required
def log_create(request, public_id):
    check = selectors.check_for_logging(user=request.user, public_id=public_id)
    form = PrintLogForm(request.POST or None)
    if request.method == "POST" and form.is_valid():
        d = form.cleaned_data
        try:
            services.print_log_create(user=request.user, check=check, copies=d["copies"],
                                      actual_print_time_s=d["actual_print_time"], succeeded=d["outcome"] == "ok",
                                      actual_material_ml=d["actual_material_ml"], failure_reason=d["failure_reason"])
        except services.CatalogueInvalid as exc:
            form.add_problems(exc.problems)
        else:
            messages.success(request, f"Print of {check.design.name} logged.")
            return redirect("check", public_id=check.public_id) if check.owner == request.user else redirect("catalogue:log_list")
    ready = check.status == check.DONE and bool((check.report or {}).get("estimate"))
    return render(request, "catalogue/log_form.html", {"check": check, "form": form, "ready": ready,
                                                       "estimate": (check.report or {}).get("estimate")},
                  status=400 if form.errors else 200)


@require_POST
@login_required
def log_accept(request, public_id):
    # The lookup comes first: a stranger gets 404 for a log he may not see; its owner, 403 from the service.
    log = selectors.print_log_get_for(user=request.user, public_id=public_id)
    services.print_log_accept(user=request.user, log=log)
    messages.success(request, "Print log accepted: the printer's calibration now counts it.")
    printer = log.logged_check.printer.slug
    return redirect(f"{reverse('catalogue:log_list')}?{urlencode({'printer': printer})}")


@require_POST
@login_required
def log_delete(request, public_id):
    log = selectors.print_log_get_for(user=request.user, public_id=public_id)
    services.print_log_delete(log=log)
    messages.success(request, "Print log deleted; the calibration no longer counts it.")
    return redirect("catalogue:log_list")
