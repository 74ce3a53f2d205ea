"""The designer's pages. Each view parses, calls one service or selector, renders."""

import mimetypes
import uuid

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.files.storage import default_storage
from django.http import FileResponse, Http404, HttpResponse, JsonResponse
from django.shortcuts import redirect, render
from django.urls import NoReverseMatch, reverse
from django.views.decorators.http import require_GET, require_POST

from services.components import KINDS
from services.errors import UnusableInput
from services.render.tables import findings_csv
from services.report import EXTRA_FILES
from services.requirements import requirements_with_defaults
from services.settings import CheckSettings
from webapp.catalogue.selectors import material_list_active, printer_list_active
from webapp.checks import presenters, selectors, services
from webapp.checks.forms import ParametricForm, RecheckForm, RevisionForm, UploadForm


def _catalogue_facts() -> dict:
    """Return the key limits of every active printer and material, and which materials each printer takes."""
    printers = {p.slug: p.snapshot() for p in printer_list_active()}
    materials = {m.slug: m.snapshot() for m in material_list_active()}
    return {
        "printer": {slug: presenters.printer_facts(p.to_dict()) for slug, p in printers.items()},
        "material": {slug: presenters.material_facts(m.to_dict()) for slug, m in materials.items()},
        "compatible": {slug: [m for m, mat in materials.items() if presenters.can_print(p, mat)]
                       for slug, p in printers.items()},
    }


@login_required
def designs(request):
    families = selectors.family_list_for(user=request.user)[:100]
    active = selectors.check_list_active_for(user=request.user)
    return render(request, "checks/designs.html", {"families": families, "active": active})


@login_required
def upload(request):
    form = UploadForm(request.POST or None, request.FILES or None)
    if request.method == "POST" and form.is_valid():
        checks = _create_checks(request, form)
        if checks:
            if len(checks) == 1:
                return redirect("check", public_id=checks[0].public_id)
            messages.success(request, f"{len(checks)} checks queued; they update here as they run.")
            return redirect("designs")
    return _render_form(request, "checks/upload.html", form, {"tab": "mesh"})


def _create_checks(request, form, revision_of=None) -> list:
    """Store and queue the uploaded files that fit the limits; each refused file is named beside the field."""
    d = form.cleaned_data
    created, refused = services.uploads_check_create(
        owner=request.user, uploads=d["file"], printer=d["printer"], material=d["material"],
        check_settings=d["check_settings"], units=d["units"], revision_of=revision_of, note=d.get("note", ""))
    for message in refused:
        form.add_error("file", message)
    return created if not refused else _keep_partial(request, created)


def _keep_partial(request, created: list) -> list:
    """Some files were refused: keep the checks that were queued and say so above the form."""
    if created:
        messages.info(request, f"{len(created)} of the files were stored and queued; the others were not stored "
                               "and are listed below the form.")
    return []


def _render_form(request, template: str, form, extra: dict):
    context = {"form": form, "facts": _catalogue_facts(), "kinds": KINDS, **extra}
    return render(request, template, context, status=400 if form.errors else 200)


@login_required
def generate(request, kind: str):
    if kind not in KINDS:
        raise Http404("No such component kind.")
    revision_of = _revision_of(request)
    form = ParametricForm(request.POST or None, kind=kind, initial=_initial_params(revision_of, kind))
    if request.method == "POST" and form.is_valid():
        check = _create_parametric(request, form, revision_of)
        if check is not None:
            return redirect("check", public_id=check.public_id)
    return _render_form(request, "checks/generate.html", form, {"tab": kind, "kind": kind, "revision_of": revision_of})


def _revision_of(request):
    public_id = request.GET.get("revision_of") or request.POST.get("revision_of")
    if not public_id:
        return None
    try:
        return selectors.design_get_for(user=request.user, public_id=uuid.UUID(public_id))
    except ValueError:
        raise Http404("No such design.") from None


def _initial_params(design, kind: str) -> dict:
    """Return a parametric design's own parameters as the form's starting values (for a new revision)."""
    if design is None or design.kind != kind:
        return {}
    return {f"part_{k}": v for k, v in (design.parameters or {}).items()}


def _create_parametric(request, form, revision_of):
    d = form.cleaned_data
    try:
        design, component = services.design_create_parametric(
            owner=request.user, kind=form.kind, params=form.params(), printer=d["printer"], material=d["material"],
            revision_of=revision_of, note=d.get("note", ""))
        settings = _own_requirements(_own_optics(d["check_settings"], component), d, form.kind, component)
        return services.check_create(owner=request.user, design=design, printer=d["printer"], material=d["material"],
                                     check_settings=settings)
    except UnusableInput as exc:
        form.add_build_error(exc)
    except services.ApplicationError as exc:
        form.add_error(None, exc.message)
    return None


def _own_optics(check_settings, component):
    """Fill empty frequencies and focal length from the generated part (its design frequency or band)."""
    from dataclasses import replace

    from services.settings import own_design

    optics = check_settings.optics
    own_freqs, _ = own_design(component.part.parameters)
    freqs = optics.freqs_ghz or own_freqs
    focal = optics.focal_length_mm if optics.focal_length_mm is not None else component.focal_length_mm
    return replace(check_settings, optics=replace(optics, freqs_ghz=freqs, focal_length_mm=focal))


def _own_requirements(check_settings, data: dict, kind: str, component):
    """Lay the stated targets over the demo lab's defaults for the kind, at the generated part's own values."""
    from dataclasses import replace

    requirements = requirements_with_defaults(data["requirement_data"], kind=kind, params=component.part.parameters,
                                              use_defaults=data.get("demo_requirements", False))
    return replace(check_settings, requirements=requirements)


@login_required
def design(request, public_id):
    obj = selectors.design_get_for(user=request.user, public_id=public_id)
    latest = obj.checks.order_by("-created_at").first()
    return render(request, "checks/design.html", {
        "design": obj, "checks": obj.checks.select_related("printer", "material"),
        "revisions": selectors.design_revisions(design=obj),
        "revision_form": RevisionForm(initial=_initial_options(obj, latest)), "recheck_form": RecheckForm(),
        "facts": _catalogue_facts()})


def _initial_options(design, latest) -> dict:
    """Return the latest check's choices as a revision form's starting values."""
    if latest is None:
        return {"units": design.units}
    settings = CheckSettings.from_dict(latest.settings)
    optics = settings.optics
    return {"printer": latest.printer.slug, "material": latest.material.slug, "units": design.units,
            "orientation": settings.orientation, "quantities": ", ".join(str(q) for q in settings.quantities),
            "freqs": ", ".join(f"{f:g}" for f in optics.freqs_ghz), "focal_length_mm": optics.focal_length_mm,
            "edge_taper_db": optics.edge_taper_db, "beam_waist_mm": optics.beam_waist_mm,
            "clear_aperture_mm": optics.clear_aperture_mm}


@login_required
@require_POST
def design_revise(request, public_id):
    obj = selectors.design_get_for(user=request.user, public_id=public_id)
    form = RevisionForm(request.POST, request.FILES)
    if form.is_valid():
        checks = _create_checks(request, form, revision_of=obj)
        if checks:
            return redirect("check", public_id=checks[0].public_id)
    return render(request, "checks/revise.html", {"design": obj, "form": form, "facts": _catalogue_facts()}, status=400)


@login_required
@require_POST
def design_recheck(request, public_id):
    obj = selectors.design_get_for(user=request.user, public_id=public_id)
    form = RecheckForm(request.POST)
    latest = obj.checks.order_by("-created_at").first()
    if not form.is_valid() or latest is None:
        messages.error(request, "Choose at least one printer and one material.")
        return redirect("design", public_id=obj.public_id)
    pairs, skipped = form.pairs()
    queued = 0
    try:
        for printer, material in pairs:
            services.check_create(owner=request.user, design=obj, printer=printer, material=material,
                                  check_settings=CheckSettings.from_dict(latest.settings))
            queued += 1
    except services.ApplicationError as exc:
        messages.error(request, exc.message)
    if skipped:
        messages.info(request, "Not queued, the printer cannot print the material: " + "; ".join(skipped) + ".")
    if queued:
        messages.success(request, f"{queued} check{'s' if queued != 1 else ''} queued; each appears below as it runs.")
    return redirect("design", public_id=obj.public_id)


@login_required
def check(request, public_id):
    obj = selectors.check_get_for(user=request.user, public_id=public_id)
    if obj.status != obj.DONE:
        return render(request, "checks/check.html", {
            "check": obj, "stages": presenters.stage_rows(obj), "advice": presenters.failure_advice(obj.error_code)})
    return render(request, "checks/report.html", {
        "check": obj, "report": obj.report, **presenters.report_context(obj.report),
        "changed": _catalogue_changed(obj), "log_print_url": _log_print_url(obj),
        "previous": selectors.previous_revision_check(check=obj),
        "has_touchstone": default_storage.exists(obj.files_prefix() + "transmission.s2p"),
        "siblings": obj.design.checks.filter(status=obj.DONE).exclude(pk=obj.pk)[:5]})


def _catalogue_changed(check) -> list[str]:
    """Return the catalogue's notes on profiles and materials edited since the check (the catalogue owns them)."""
    from webapp.catalogue.selectors import catalogue_changed_since

    return catalogue_changed_since(check)


def _log_print_url(check) -> str | None:
    """Return the catalogue's page for logging a real print of this check, when the site has one."""
    try:
        return reverse("catalogue:log_create", args=[check.public_id])
    except NoReverseMatch:
        return None


@login_required
@require_GET
def compare(request):
    try:
        ids = list(dict.fromkeys(uuid.UUID(v) for v in request.GET.getlist("c")))
    except ValueError:
        raise Http404("No such check.") from None
    if len(ids) > COMPARE_AT_MOST:
        messages.info(request, f"You ticked {len(ids)} checks; the first {COMPARE_AT_MOST} are compared side by side.")
        ids = ids[:COMPARE_AT_MOST]
    if len(ids) < 2:
        messages.info(request, "Tick two or more finished checks to compare them.")
        return redirect("designs")
    checks = selectors.checks_get_for(user=request.user, public_ids=ids)
    return render(request, "checks/compare.html", presenters.comparison(checks))


COMPARE_AT_MOST = 6  # columns that stay readable side by side on a 1366 px screen


@login_required
@require_GET
def check_status(request, public_id):
    obj = selectors.check_get_for(user=request.user, public_id=public_id)
    return JsonResponse(obj.status_dict())


@login_required
@require_GET
def check_report_json(request, public_id):
    obj = _with_report(request, public_id)
    return _attachment(JsonResponse(obj.report, json_dumps_params={"indent": 2}), f"{_download_name(obj)}.json")


@login_required
@require_GET
def check_pdf(request, public_id):
    obj = _with_report(request, public_id)
    pdf = services.check_pdf(check=obj, site_root=request.build_absolute_uri("/"))
    return _attachment(HttpResponse(pdf, content_type="application/pdf"), f"{_download_name(obj)}.pdf")


@login_required
@require_GET
def check_findings_csv(request, public_id):
    obj = _with_report(request, public_id)
    csv = HttpResponse(findings_csv(obj.report), content_type="text/csv; charset=utf-8")
    return _attachment(csv, f"{_download_name(obj)}-findings.csv")


def _with_report(request, public_id):
    """Return the user's check, or answer 404 while its report is not ready."""
    obj = selectors.check_get_for(user=request.user, public_id=public_id)
    if obj.report is None:
        raise Http404("The report is not ready.")
    return obj


def _attachment(response: HttpResponse, filename: str) -> HttpResponse:
    response["Content-Disposition"] = f'attachment; filename="{filename}"'
    return response


def _download_name(check) -> str:
    stem = check.design.name.rsplit(".", 1)[0]
    safe = "".join(ch if ch.isalnum() or ch in "-_" else "-" for ch in stem)[:60] or "design"
    return f"{safe}-{check.printer_snapshot.get('slug', 'printer')}-report"


@login_required
@require_GET
def check_file(request, public_id, name):
    obj = selectors.check_get_for(user=request.user, public_id=public_id)
    if obj.report is None or (name not in obj.report.get("figures", []) and name not in EXTRA_FILES):
        raise Http404("No such file in this report.")
    path = obj.files_prefix() + name
    if not default_storage.exists(path):
        raise Http404("No such file in this report.")
    content_type = mimetypes.guess_type(name)[0] or "application/octet-stream"
    response = FileResponse(default_storage.open(path, "rb"), content_type=content_type,
                            as_attachment=not name.endswith(".png"), filename=name)
    response["Cache-Control"] = "private, max-age=86400"  # a finished report's pictures never change
    return response
