"""Designs (what a user submits) and checks (one run of the pipeline on a design)."""

import uuid

from django.conf import settings
from django.db import models


class Design(models.Model):
    """An uploaded mesh or a set of component parameters; immutable once submitted."""

    public_id = models.UUIDField(default=uuid.uuid4, unique=True, editable=False)
    owner = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="designs")
    name = models.CharField(max_length=200)
    sha256 = models.CharField(max_length=64)
    units = models.CharField(max_length=8, blank=True, help_text="blank: not stated (mm assumed and flagged)")
    source_format = models.CharField(max_length=16, blank=True)
    stored_name = models.CharField(max_length=100, help_text="generated file name in private storage")
    size_bytes = models.PositiveBigIntegerField(default=0)
    parameters = models.JSONField(null=True, blank=True)
    revision_of = models.ForeignKey("self", null=True, blank=True, on_delete=models.SET_NULL, related_name="revisions")
    # Every revision of one design shares its family; the first is revision 1.
    family = models.UUIDField(default=uuid.uuid4, db_index=True, editable=False)
    revision = models.PositiveIntegerField(default=1)
    kind = models.CharField(max_length=20, blank=True, help_text="component kind of a parametric design; blank: a mesh")
    note = models.CharField(max_length=300, blank=True, help_text="what changed in this revision, in the designer's words")
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ["-created_at"]
        indexes = [models.Index(fields=["owner", "sha256"])]

    def __str__(self) -> str:
        return self.name

    @property
    def is_parametric(self) -> bool:
        return bool(self.kind)


class Check(models.Model):
    QUEUED, RUNNING, DONE, FAILED, CANCELLED = "queued", "running", "done", "failed", "cancelled"
    STATUSES = [(s, s) for s in (QUEUED, RUNNING, DONE, FAILED, CANCELLED)]
    ACTIVE = (QUEUED, RUNNING)

    public_id = models.UUIDField(default=uuid.uuid4, unique=True, editable=False)
    owner = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="checks")
    design = models.ForeignKey(Design, on_delete=models.CASCADE, related_name="checks")
    printer = models.ForeignKey("catalogue.Printer", on_delete=models.PROTECT, related_name="checks")
    material = models.ForeignKey("catalogue.Material", on_delete=models.PROTECT, related_name="checks")
    # The profile and material as they were when the check was submitted: a later edit changes nothing here.
    printer_snapshot = models.JSONField()
    material_snapshot = models.JSONField()
    settings = models.JSONField(default=dict)
    status = models.CharField(max_length=10, choices=STATUSES, default=QUEUED)
    stage = models.CharField(max_length=20, default="queued")
    progress = models.FloatField(default=0.0)
    attempts = models.PositiveSmallIntegerField(default=0)
    heartbeat_at = models.DateTimeField(null=True, blank=True)
    error = models.TextField(blank=True)
    error_code = models.CharField(max_length=40, blank=True)
    verdict = models.CharField(max_length=32, blank=True)
    report = models.JSONField(null=True, blank=True)
    created_at = models.DateTimeField(auto_now_add=True)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at"]

    def __str__(self) -> str:
        return f"{self.design.name} on {self.printer_snapshot.get('name')}"

    @property
    def is_active(self) -> bool:
        return self.status in self.ACTIVE

    def files_prefix(self) -> str:
        """Return the private-storage folder that holds this check's pictures and exports."""
        return f"reports/{self.public_id}/"

    # One wording of a check's state for every page and list (the API keeps the plain status words).
    STATUS_LABELS = {"queued": "waiting for a worker", "running": "checking", "done": "done",
                     "failed": "failed", "cancelled": "cancelled"}

    @property
    def status_label(self) -> str:
        return self.STATUS_LABELS.get(self.status, self.status)

    def status_dict(self) -> dict:
        from webapp.checks.presenters import STAGES

        return {"id": str(self.public_id), "status": self.status, "label": self.status_label, "stage": self.stage,
                "stage_label": dict(STAGES).get(self.stage, self.stage.replace("_", " ")),
                "progress": round(self.progress, 3), "attempts": self.attempts, "error": self.error or None,
                "error_code": self.error_code or None, "verdict": self.verdict or None}
