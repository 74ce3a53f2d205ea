from django.contrib import admin
from django.contrib.auth import views as auth_views
from django.urls import include, path
from django.views.generic import RedirectView

from webapp.accounts import views as accounts_views
from webapp.api import views as api_views

urlpatterns = [
    path("", RedirectView.as_view(pattern_name="designs"), name="home"),
    path("login/", accounts_views.LoginView.as_view(), name="login"),
    path("logout/", auth_views.LogoutView.as_view(), name="logout"),
    path("", include("webapp.checks.urls")),
    path("api/v1/", include("webapp.api.urls")),
    path("account/api-tokens/", api_views.tokens, name="api_tokens"),
    path("catalogue/", include("webapp.catalogue.urls")),
    path("admin/", admin.site.urls),
]
