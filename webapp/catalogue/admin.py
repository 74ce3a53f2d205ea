from django.contrib import admin

from webapp.catalogue.models import Material, Printer


@admin.register(Printer)
class PrinterAdmin(admin.ModelAdmin):
    list_display = ("name", "slug", "version", "retired")


@admin.register(Material)
class MaterialAdmin(admin.ModelAdmin):
    list_display = ("name", "slug", "version", "retired")
