"""``manage.py create_user USER --role viewer|editor|admin [--email E]``: an API user with one
role (the password is read from LOOPKEEP_PASSWORD, or the account has none and signs in with a
token: ``manage.py drf_create_token USER``)."""

from __future__ import annotations

import os

from django.contrib.auth import get_user_model
from django.contrib.auth.models import Group
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

from api.roles import ROLES


class Command(BaseCommand):
    help = "Create (or update) a user with one API role: viewer, editor or admin."

    def add_arguments(self, parser) -> None:
        parser.add_argument("username")
        parser.add_argument("--role", required=True, choices=ROLES)
        parser.add_argument("--email", default="")

    @transaction.atomic
    def handle(self, *args, username: str, role: str, email: str, **options) -> None:
        try:
            group = Group.objects.get(name=role)
        except Group.DoesNotExist as exc:
            raise CommandError(f"role {role!r} is missing: run `manage.py migrate`") from exc
        user, created = get_user_model().objects.get_or_create(
            username=username, defaults={"email": email}
        )
        password = os.environ.get("LOOPKEEP_PASSWORD")
        if password:
            user.set_password(password)
        elif created:
            user.set_unusable_password()
        user.save()
        user.groups.remove(*Group.objects.filter(name__in=ROLES))
        user.groups.add(group)
        verb = "created" if created else "updated"
        self.stdout.write(f"{verb} user {username} with role {role}")
