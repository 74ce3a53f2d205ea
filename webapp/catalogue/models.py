"""Printer profiles and materials as the lab manager keeps them. Every edit makes a new version."""

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
