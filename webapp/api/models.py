"""Personal API tokens: many per user, named, stored as a digest, shown once, revocable."""

import uuid

from django.conf import settings
from django.db import models


class ApiToken(models.Model):
    """One personal token. Only its sha256 and a short prefix (for display) are kept."""

    public_id = models.UUIDField(default=uuid.uuid4, unique=True, editable=False)
    user = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="api_tokens")
    name = models.CharField(max_length=100)
    prefix = models.CharField(max_length=16, db_index=True, help_text="first characters of the token, for display")
    digest = models.CharField(max_length=64, unique=True, help_text="sha256 of the whole token, hex")
    created_at = models.DateTimeField(auto_now_add=True)
    last_used_at = models.DateTimeField(null=True, blank=True)
    revoked_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at"]

    def __str__(self) -> str:
        return f"{self.name} ({self.prefix}…)"

    @property
    def is_active(self) -> bool:
        return self.revoked_at is None
