"""Start the site and one real Celery worker process; Ctrl-C stops both."""

import os
import signal
import subprocess
import sys
import time

from django.conf import settings
from django.core.management import call_command
from django.core.management.base import BaseCommand


class Command(BaseCommand):
    help = "Run the development site and a worker process together."

    def add_arguments(self, parser):
        parser.add_argument("--port", default=os.environ.get("PORT", "8000"))

    def handle(self, *args, port, **options):
        worker = subprocess.Popen([sys.executable, "-m", "celery", "-A", "webapp", "worker", "--loglevel", "INFO",
                                   "--concurrency", "1", "--hostname", "phasewright-dev@%h"])
        broker = settings.CELERY_BROKER_URL.split("://")[0]
        self.stdout.write(f"worker started (pid {worker.pid}, broker: {broker}); site on http://127.0.0.1:{port}/")
        try:
            call_command("runserver", f"127.0.0.1:{port}", use_reloader=False)
        finally:
            self._stop(worker)

    def _stop(self, worker: subprocess.Popen) -> None:
        """Ask the worker for a warm shutdown, then make sure it is gone."""
        if worker.poll() is None:
            worker.send_signal(signal.SIGTERM)
            deadline = time.monotonic() + 20
            while worker.poll() is None and time.monotonic() < deadline:
                time.sleep(0.2)
            if worker.poll() is None:
                worker.kill()
        self.stdout.write("site and worker stopped")
