"""Create (or reset) the local demo account and print its credentials."""

from __future__ import annotations

import secrets

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand


class Command(BaseCommand):
    help = "Create or reset the demo user (a local administrator) and print its name and a fresh password."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--username", default="demo")

    def handle(self, *args, **options) -> None:
        user_model = get_user_model()
        password = "-".join(secrets.token_urlsafe(4) for _ in range(3))
        user, created = user_model.objects.get_or_create(username=options["username"])
        user.is_staff = True
        user.is_superuser = True
        user.set_password(password)
        user.save()
        self.stdout.write(f"demo user: {user.username}   password: {password}" + ("" if created else "   (reset)"))
