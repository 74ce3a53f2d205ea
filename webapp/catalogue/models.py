"""Printer profiles and materials as the lab manager keeps them. Every edit makes a new version."""

import math
import uuid

from django.conf import settings
from django.db import models

from services.profiles import Material as MaterialSnapshot
from services.profiles import PrinterProfile


class CatalogueEntry(models.Model):
    slug = models.SlugField(unique=True)
    name = models.CharField(max_length=120)
    data = models.JSONField(help_text="every field of the domain snapshot")
    version = models.PositiveIntegerField(default=1)
    retired = models.BooleanField(default=False)
    updated_at = models.DateTimeField(auto_now=True)

    class Meta:
        abstract = True
        ordering = ["name"]

    def __str__(self) -> str:
        return self.name


class Printer(CatalogueEntry):
    def snapshot(self) -> PrinterProfile:
        """Return the frozen profile a check runs against."""
        return PrinterProfile.from_dict({**self.data, "slug": self.slug, "name": self.name, "version": self.version})


class Material(CatalogueEntry):
    def snapshot(self) -> MaterialSnapshot:
        """Return the frozen material a check runs against."""
        return MaterialSnapshot.from_dict({**self.data, "slug": self.slug, "name": self.name, "version": self.version})


class EntryVersion(models.Model):
    """One saved state of a profile or material; never edited, so history and old reports agree."""

    version = models.PositiveIntegerField()
    data = models.JSONField(help_text="the whole snapshot as saved, name and version included")
    note = models.CharField(max_length=300, blank=True, help_text="what changed and why, in the editor's words")
    created_at = models.DateTimeField(auto_now_add=True)
    created_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                                   related_name="+")

    class Meta:
        abstract = True
        ordering = ["-version"]


class PrinterVersion(EntryVersion):
    entry = models.ForeignKey(Printer, on_delete=models.CASCADE, related_name="versions")

    class Meta(EntryVersion.Meta):
        constraints = [models.UniqueConstraint(fields=["entry", "version"], name="printer_version_once")]


class MaterialVersion(EntryVersion):
    entry = models.ForeignKey(Material, on_delete=models.CASCADE, related_name="versions")

    class Meta(EntryVersion.Meta):
        constraints = [models.UniqueConstraint(fields=["entry", "version"], name="material_version_once")]


class PrintLog(models.Model):
    """A finished print of a checked part: what really happened, against what the check estimated.

    The estimate is copied from the report when the print is logged; ``model_print_time_s`` is
    that estimate without any calibration factor (what the time model alone said), which is what
    the next calibration fits, and ``time_model_key`` says which time model said it.
    """

    public_id = models.UUIDField(default=uuid.uuid4, unique=True, editable=False)
    # Not named ``check``: that would hide Model.check(), Django's system-check hook.
    logged_check = models.ForeignKey("checks.Check", on_delete=models.CASCADE, related_name="print_logs")
    logged_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, on_delete=models.SET_NULL, related_name="+")
    copies = models.PositiveSmallIntegerField(default=1)
    actual_print_time_s = models.FloatField()
    actual_material_ml = models.FloatField(null=True, blank=True, help_text="blank: not measured")
    succeeded = models.BooleanField()
    failure_reason = models.TextField(blank=True)
    estimated_print_time_s = models.FloatField(help_text="as the report gave it (calibrated or not)")
    model_print_time_s = models.FloatField(help_text="the time model's estimate, uncalibrated")
    estimated_material_ml = models.FloatField()
    time_model_key = models.CharField(max_length=16)
    created_at = models.DateTimeField(auto_now_add=True)
    # A designer's log moves the lab's calibration only once a lab manager accepts it (a lab
    # manager's own logs are accepted as they are made).
    accepted_at = models.DateTimeField(null=True, blank=True)
    accepted_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                                    related_name="+")

    class Meta:
        ordering = ["-created_at"]

    def __str__(self) -> str:
        return f"print of {self.logged_check_id} ({'ok' if self.succeeded else 'failed'})"

    @property
    def time_ratio(self) -> float | None:
        """Return actual over estimated print time (1.0: the estimate was right); None for an unusable row."""
        ratio = self.actual_print_time_s / self.estimated_print_time_s if self.estimated_print_time_s else math.nan
        return ratio if math.isfinite(ratio) and ratio > 0 else None

    @property
    def usable(self) -> bool:
        """Return False for a row stored before times were validated (infinite, NaN or not positive)."""
        return self.time_ratio is not None

    @property
    def material_ratio(self) -> float | None:
        if self.actual_material_ml is None or self.estimated_material_ml <= 0:
            return None
        return self.actual_material_ml / self.estimated_material_ml
