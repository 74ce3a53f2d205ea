from django.apps import AppConfig


class ApiConfig(AppConfig):
    name = "webapp.api"
    label = "api"
