"""Requeue checks whose worker went silent; run it every minute or two (cron or a timer unit)."""

from django.core.management.base import BaseCommand

from webapp.checks.services import check_requeue_stale


class Command(BaseCommand):
    help = "Requeue running checks with a stale heartbeat and fail those out of attempts."

    def add_arguments(self, parser):
        parser.add_argument("--stale-after-s", type=int, default=None)

    def handle(self, *args, stale_after_s=None, **options):
        requeued, failed = check_requeue_stale(stale_after_s=stale_after_s)
        self.stdout.write(f"requeued {requeued}, failed {failed}")
