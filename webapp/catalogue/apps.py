from django.apps import AppConfig


class CatalogueConfig(AppConfig):
    name = "webapp.catalogue"
    label = "catalogue"
