"""The Celery app. Workers run ``celery -A webapp worker``."""

import importlib
import logging
import os

from celery import Celery
from celery.signals import task_received, worker_process_init, worker_ready, worker_shutdown

from services import limits
from webapp.checks import queue

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "webapp.settings")

app = Celery("phasewright")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks(["webapp.checks"])
queue.use_app(app)  # the checks' service sends through this app by the task's name


def _make_broker_folders() -> None:
    """Create the folder broker's folders (cheap, and kombu's filesystem transport expects them)."""
    from django.conf import settings

    for key in ("data_folder_in", "control_folder", "processed_folder"):
        os.makedirs(settings.FOLDER_BROKER_OPTIONS[key], exist_ok=True)


_make_broker_folders()


# Imported by each child before it takes work, so their code is not counted against a check's memory
# (the optics and the Agg renderer too: with rules beside them, a library mapped under the bound could fail to load).
PIPELINE_MODULES = ("webapp.checks.services", "services.report", "services.optics", "matplotlib.pyplot",
                    "matplotlib.backends.backend_agg", "cv2")


@worker_process_init.connect
def bound_child_memory(**_) -> None:
    """Cap the address space a check may add to this child: an allocation past it raises MemoryError.

    worker_max_memory_per_child only replaces a child after its task ends; this bounds the task itself.
    """
    from django.conf import settings

    if settings.PHASEWRIGHT_CHECK_MEMORY_MIB <= 0:
        return
    for name in PIPELINE_MODULES:
        importlib.import_module(name)
    if settings.PHASEWRIGHT_CONCURRENT_STAGES:
        from services.stages import prepare_threads

        prepare_threads()  # the stage threads' stacks and arenas, mapped once per child and reused by every check
    from services.layers import prepare_helpers

    prepare_helpers()  # the same for the slicing's two helper threads
    limit = limits.cap_memory(settings.PHASEWRIGHT_CHECK_MEMORY_MIB)
    logging.getLogger(__name__).info("worker child %s: address space capped at %.0f MiB", os.getpid(), limit / 2**20)


@worker_ready.connect
def start_heartbeat(**_) -> None:
    """Stamp the checks this worker holds, from its main process, for as long as it lives."""
    from django.conf import settings

    from webapp.checks.heartbeat import HEARTBEAT

    HEARTBEAT.start(settings.PHASEWRIGHT_HEARTBEAT_S, hold_taken_s=settings.PHASEWRIGHT_STALE_AFTER_S)


@worker_ready.connect
def stop_with_serve(**_) -> None:
    """A worker `manage.py serve` started stops once that serve is gone (webapp.checks.parent_watch)."""
    from webapp.checks.parent_watch import watch_parent

    watch_parent()


@worker_shutdown.connect
def stop_heartbeat(**_) -> None:
    from webapp.checks.heartbeat import HEARTBEAT

    HEARTBEAT.stop()


@task_received.connect
def hold_received_check(request=None, **_) -> None:
    from webapp.checks.heartbeat import on_task_received

    on_task_received(request)
