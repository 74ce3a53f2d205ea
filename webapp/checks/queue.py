"""Send a check to the workers by the task's name: the service queues work without importing the task module.

The task module (``webapp.checks.tasks``) imports the service that runs a check; the service reaches the task
only through its registered name and the project's Celery app, which ``webapp.celery`` hands over here when
it is made (so this module imports neither).
"""

import importlib

from webapp.checks.task_names import RUN_CHECK

_app = None


def use_app(app) -> None:
    """Send through this Celery app (called once by ``webapp.celery`` as the project loads)."""
    global _app
    _app = app


def send_run_check(check_id: int) -> None:
    """Queue one run of the check with this primary key."""
    if _app is None:
        raise RuntimeError("webapp.celery has not been loaded: import the webapp package first")
    task = _app.tasks.get(RUN_CHECK)
    if task is None:  # a worker's app finds its tasks itself; a web process loads the module by name here
        importlib.import_module(RUN_CHECK.rpartition(".")[0])
        task = _app.tasks[RUN_CHECK]
    # Sent as the task sends itself: the worker's environment, not the sender's, decides its time limits.
    task.delay(check_id)
