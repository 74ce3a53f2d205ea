"""The catalogue's pages, under /catalogue/ (URL names in the "catalogue" namespace)."""

from django.urls import path
from django.views.generic import RedirectView

from webapp.catalogue import views

app_name = "catalogue"


def _entry_paths(kind: str, plural: str) -> list:
    k = {"kind": kind}
    return [
        path(f"{plural}/", views.entry_list, k, name=f"{kind}_list"),
        path(f"{plural}/new/", views.entry_create, k, name=f"{kind}_create"),
        path(f"{plural}/<slug:slug>/", views.entry_detail, k, name=f"{kind}_detail"),
        path(f"{plural}/<slug:slug>/edit/", views.entry_edit, k, name=f"{kind}_edit"),
        path(f"{plural}/<slug:slug>/retire/", views.entry_retire, k, name=f"{kind}_retire"),
    ]


urlpatterns = [
    path("", RedirectView.as_view(pattern_name="catalogue:printer_list"), name="index"),
    *_entry_paths("printer", "printers"),
    *_entry_paths("material", "materials"),
    path("materials/<slug:slug>/rf.png", views.material_rf_png, name="material_rf_png"),
    path("materials/<slug:slug>/measure/", views.material_measure, name="material_measure"),
    path("logs/", views.log_list, name="log_list"),
    path("logs/new/<uuid:public_id>/", views.log_create, name="log_create"),
    path("logs/<uuid:public_id>/accept/", views.log_accept, name="log_accept"),
    path("logs/<uuid:public_id>/delete/", views.log_delete, name="log_delete"),
]
