"""Seed the starter catalogue and the two demo users (designer, labmanager)."""

import os
import secrets

from django.contrib.auth.models import Group, User
from django.core.management.base import BaseCommand

from webapp.accounts.roles import LAB_MANAGER_GROUP
from webapp.catalogue.services import catalogue_seed


class Command(BaseCommand):
    help = "Create the starter printers, materials and the demo users if they are missing."

    def handle(self, *args, **options):
        printers, materials = catalogue_seed()
        self.stdout.write(f"catalogue: {printers} printers and {materials} materials added")
        password = os.environ.get("PHASEWRIGHT_DEMO_PASSWORD") or ""
        group, _ = Group.objects.get_or_create(name=LAB_MANAGER_GROUP)
        created = []
        for username in ("designer", "labmanager"):
            if User.objects.filter(username=username).exists():
                continue
            password = password or secrets.token_urlsafe(9)
            user = User.objects.create_user(username, password=password)
            if username == "labmanager":
                user.groups.add(group)
                user.is_staff = True
                user.save()
            created.append(username)
        if created:
            self.stdout.write(f"demo users {', '.join(created)} created with password: {password}")
        else:
            self.stdout.write("demo users exist already (set their passwords with `manage.py changepassword`)")
