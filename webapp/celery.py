"""The Celery app. Workers run ``celery -A webapp worker``."""

import importlib
import logging
import os
import resource

from celery import Celery
from celery.signals import worker_process_init

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


# Imported by each child before it takes work, so their code is not counted against a check's memory.
PIPELINE_MODULES = ("webapp.checks.services", "services.report", "matplotlib.pyplot", "cv2")


def _address_space_bytes() -> int:
    """Return this process's mapped address space (VmSize), the quantity RLIMIT_AS bounds."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmSize:"):
                return int(line.split()[1]) * 1024
    raise OSError("no VmSize in /proc/self/status")


@worker_process_init.connect
def bound_child_memory(**_) -> None:
    """Cap the address space a check may add to this child: an allocation past it raises MemoryError.

    worker_max_memory_per_child only replaces a child after its task ends; this bounds the task itself.
    """
    from django.conf import settings

    headroom_mib = settings.PHASEWRIGHT_CHECK_MEMORY_MIB
    if headroom_mib <= 0:
        return
    for name in PIPELINE_MODULES:
        importlib.import_module(name)
    limit = _address_space_bytes() + headroom_mib * 2**20
    _, hard = resource.getrlimit(resource.RLIMIT_AS)
    resource.setrlimit(resource.RLIMIT_AS, (limit if hard == resource.RLIM_INFINITY else min(limit, hard), hard))
    logging.getLogger(__name__).info("worker child %s: address space capped at %.0f MiB", os.getpid(), limit / 2**20)
