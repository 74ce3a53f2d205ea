from django.contrib import admin

from webapp.catalogue.models import Material, Printer, PrintLog


class EntryAdmin(admin.ModelAdmin):
    list_display = ("name", "slug", "version", "retired")
    # Edits go through the catalogue pages, which validate and keep a version; here they would do neither.
    readonly_fields = ("slug", "name", "data", "version")


admin.site.register(Printer, EntryAdmin)
admin.site.register(Material, EntryAdmin)


@admin.register(PrintLog)
class PrintLogAdmin(admin.ModelAdmin):
    list_display = ("logged_check", "succeeded", "actual_print_time_s", "estimated_print_time_s", "created_at")
