from django.apps import AppConfig


class ChecksConfig(AppConfig):
    name = "webapp.checks"
    label = "checks"
