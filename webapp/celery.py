"""The Celery app. Workers run ``celery -A webapp worker``."""

import os

from celery import Celery

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "webapp.settings")

app = Celery("phasewright")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks(["webapp.checks"])


def _make_broker_folders() -> None:
    """Create the folder broker's folders (cheap, and kombu's filesystem transport expects them)."""
    from django.conf import settings

    for key in ("data_folder_in", "control_folder", "processed_folder"):
        os.makedirs(settings.FOLDER_BROKER_OPTIONS[key], exist_ok=True)


_make_broker_folders()
