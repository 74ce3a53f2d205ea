"""The designer's pages: designs and their revisions, checks and their reports, comparisons."""

from django.urls import path

from webapp.checks import views

urlpatterns = [
    path("designs/", views.designs, name="designs"),
    path("designs/new/", views.upload, name="upload"),
    path("designs/new/<slug:kind>/", views.generate, name="generate"),
    path("designs/<uuid:public_id>/", views.design, name="design"),
    path("designs/<uuid:public_id>/revise/", views.design_revise, name="design_revise"),
    path("designs/<uuid:public_id>/recheck/", views.design_recheck, name="design_recheck"),
    path("checks/compare/", views.compare, name="compare"),
    path("checks/<uuid:public_id>/", views.check, name="check"),
    path("checks/<uuid:public_id>/status.json", views.check_status, name="check_status"),
    path("checks/<uuid:public_id>/report.json", views.check_report_json, name="check_report_json"),
    path("checks/<uuid:public_id>/report.pdf", views.check_pdf, name="check_pdf"),
    path("checks/<uuid:public_id>/findings.csv", views.check_findings_csv, name="check_findings_csv"),
    path("checks/<uuid:public_id>/files/<str:name>", views.check_file, name="check_file"),
]
