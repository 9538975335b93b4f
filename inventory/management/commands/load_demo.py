"""``manage.py load_demo``: import the invented demo sites of fixtures/demo/ (and, with DEBUG on
and the embedded SQLite database, create the ``demo`` admin login so the admin can be opened at
once; ``config.accounts`` keeps that login from working anywhere else)."""

from __future__ import annotations

from pathlib import Path

from django.conf import settings
from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError

from config.accounts import DEMO_USERNAME, demo_account_allowed
from inventory.services import SiteImportError, site_import

DEMO_DIR = Path(settings.BASE_DIR) / "fixtures" / "demo"


class Command(BaseCommand):
    help = "Import the demo sites (fixtures/demo/*.json); on DEBUG, create the demo admin login."

    def handle(self, *args, **options) -> None:
        from inventory.sitefile.files import read_site_file

        files = sorted(DEMO_DIR.glob("*.json"))
        if not files:
            raise CommandError(f"no demo site files in {DEMO_DIR}")
        for path in files:
            try:
                result = site_import(doc=read_site_file(path))
            except SiteImportError as exc:
                raise CommandError(f"{path.name}:\n{exc}") from exc
            self.stdout.write(result.summary())
        if demo_account_allowed():
            users = get_user_model().objects
            if not users.filter(username=DEMO_USERNAME).exists():
                users.create_superuser(DEMO_USERNAME, "demo@example.invalid", "demo")
            self.stdout.write("admin login for the demo: demo / demo (DEBUG only)")
        else:
            self.stdout.write(
                "no demo login created: it exists only in the embedded SQLite database with "
                "DEBUG on"
            )
