from django.contrib import admin
from django.contrib.auth import views as auth_views
from django.urls import path
from django.views.generic import RedirectView

from webapp.checks import views as checks

urlpatterns = [
    path("", RedirectView.as_view(pattern_name="designs"), name="home"),
    path("login/", auth_views.LoginView.as_view(), name="login"),
    path("logout/", auth_views.LogoutView.as_view(), name="logout"),
    path("designs/", checks.designs, name="designs"),
    path("designs/new/", checks.upload, name="upload"),
    path("designs/<uuid:public_id>/", checks.design, name="design"),
    path("checks/<uuid:public_id>/", checks.check, name="check"),
    path("checks/<uuid:public_id>/status.json", checks.check_status, name="check_status"),
    path("checks/<uuid:public_id>/report.json", checks.check_report_json, name="check_report_json"),
    path("checks/<uuid:public_id>/files/<str:name>", checks.check_file, name="check_file"),
    path("admin/", admin.site.urls),
]
