from django.contrib import admin

from webapp.checks.models import Check, Design


@admin.register(Design)
class DesignAdmin(admin.ModelAdmin):
    list_display = ("name", "owner", "created_at")
    readonly_fields = ("public_id", "sha256", "stored_name")


@admin.register(Check)
class CheckAdmin(admin.ModelAdmin):
    list_display = ("design", "owner", "status", "verdict", "attempts", "created_at")
    list_filter = ("status",)
