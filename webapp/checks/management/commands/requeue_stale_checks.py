"""Requeue checks whose worker went silent: once, or as a long-running service with --every-s."""

import signal
import threading

from django.core.management.base import BaseCommand

from webapp.checks.services import check_requeue_stale
from webapp.checks.sweeper import folder_queue_check_ids, sweep_every


class Command(BaseCommand):
    help = "Requeue checks with a stale heartbeat and fail those out of attempts (once, or every N seconds)."

    def add_arguments(self, parser):
        parser.add_argument("--stale-after-s", type=int, default=None)
        parser.add_argument("--every-s", type=float, default=None,
                            help="keep running and sweep every this many seconds (production: 15)")

    def handle(self, *args, stale_after_s=None, every_s=None, **options):
        if every_s is None:
            requeued, failed = check_requeue_stale(stale_after_s=stale_after_s, pending_ids=folder_queue_check_ids())
            self.stdout.write(f"requeued {requeued}, failed {failed}")
            return
        if every_s <= 0:
            self.stderr.write(f"--every-s must be above 0 seconds, not {every_s}.")
            raise SystemExit(2)
        stop = threading.Event()
        for sig in (signal.SIGTERM, signal.SIGINT):
            signal.signal(sig, lambda *_: stop.set())
        self.stdout.write(f"sweeping every {every_s:g} s", ending="\n")
        self.stdout.flush()
        sweep_every(every_s, stop, lambda r, f: self.stdout.write(f"requeued {r}, failed {f}"), stale_after_s)
        self.stdout.write("sweeper stopped")
