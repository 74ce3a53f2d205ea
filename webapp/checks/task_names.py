"""The registered names of the checks' Celery tasks, for code that must not import the task module."""

RUN_CHECK = "webapp.checks.tasks.run_check"
