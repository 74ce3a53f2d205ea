"""The Celery app. Workers run ``celery -A webapp worker``."""

import os

from celery import Celery

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "webapp.settings")

app = Celery("phasewright")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks(["webapp.checks"])


def _make_broker_folders() -> None:
    """Create the folder broker's folders: kombu's filesystem transport expects them to exist."""
    from django.conf import settings

    if settings.CELERY_BROKER_URL.startswith("filesystem"):
        for key in ("data_folder_in", "control_folder", "processed_folder"):
            os.makedirs(settings.CELERY_BROKER_TRANSPORT_OPTIONS[key], exist_ok=True)


_make_broker_folders()
