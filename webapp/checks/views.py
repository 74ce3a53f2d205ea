"""The designer's pages. Each view parses, calls one service or selector, renders."""

import mimetypes

from django.contrib.auth.decorators import login_required
from django.core.files.storage import default_storage
from django.http import FileResponse, Http404, JsonResponse
from django.shortcuts import redirect, render
from django.views.decorators.http import require_GET

from webapp.checks import selectors, services
from webapp.checks.forms import UploadForm


@login_required
def designs(request):
    checks = selectors.check_list_for(user=request.user)[:100]
    return render(request, "checks/designs.html", {"checks": checks})


@login_required
def upload(request):
    form = UploadForm(request.POST or None, request.FILES or None)
    if request.method == "POST" and form.is_valid():
        d = form.cleaned_data
        try:
            design = services.design_create(owner=request.user, name=d["file"].name, data=d["file"].read(), units=d["units"])
            check = services.check_create(owner=request.user, design=design, printer=d["printer"],
                                          material=d["material"], check_settings=d["check_settings"])
        except services.ApplicationError as exc:
            form.add_error("file" if exc.code in ("empty_file", "too_large") else None, exc.message)
        else:
            return redirect("check", public_id=check.public_id)
    return render(request, "checks/upload.html", {"form": form}, status=400 if form.errors else 200)


@login_required
def design(request, public_id):
    obj = selectors.design_get_for(user=request.user, public_id=public_id)
    return render(request, "checks/design.html", {"design": obj, "checks": obj.checks.all()})


@login_required
def check(request, public_id):
    obj = selectors.check_get_for(user=request.user, public_id=public_id)
    template = "checks/report.html" if obj.status == obj.DONE else "checks/check.html"
    return render(request, template, {"check": obj, "report": obj.report})


@login_required
@require_GET
def check_status(request, public_id):
    obj = selectors.check_get_for(user=request.user, public_id=public_id)
    return JsonResponse(obj.status_dict())


@login_required
@require_GET
def check_report_json(request, public_id):
    obj = selectors.check_get_for(user=request.user, public_id=public_id)
    if obj.report is None:
        raise Http404("The report is not ready.")
    return JsonResponse(obj.report, json_dumps_params={"indent": 2})


@login_required
@require_GET
def check_file(request, public_id, name):
    obj = selectors.check_get_for(user=request.user, public_id=public_id)
    if obj.report is None or (name not in obj.report.get("figures", []) and name != "transmission.s2p"):
        raise Http404("No such file in this report.")
    path = obj.files_prefix() + name
    if not default_storage.exists(path):
        raise Http404("No such file in this report.")
    content_type = mimetypes.guess_type(name)[0] or "application/octet-stream"
    return FileResponse(default_storage.open(path, "rb"), content_type=content_type,
                        as_attachment=not name.endswith(".png"), filename=name)
