"""``python manage.py create_api_token USERNAME [--name NAME]``: print a new personal API token."""

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError

from webapp.api.services import api_token_create


class Command(BaseCommand):
    help = "Make a personal API token for a user and print it (it is shown only this once)."

    def add_arguments(self, parser):
        parser.add_argument("username")
        parser.add_argument("--name", default="made on the command line", help="what will use the token")

    def handle(self, *args, username, name, **options):
        user = get_user_model().objects.filter(username=username).first()
        if user is None:
            raise CommandError(f"There is no user {username!r}.")
        _, raw = api_token_create(user=user, name=name)
        self.stdout.write(raw)
