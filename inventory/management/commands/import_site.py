"""``manage.py import_site FILE [--dry-run]``: load a site file (JSON or YAML) atomically."""

from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError
from django.db import DatabaseError

from inventory.services import SiteImportError, site_import


class Command(BaseCommand):
    help = "Import (upsert) a loopkeep.site/1 file. Nothing is written if any error is found."

    def add_arguments(self, parser) -> None:
        parser.add_argument("file", help="path of the site file (.json, .yaml or .yml)")
        parser.add_argument(
            "--dry-run", action="store_true", help="validate and report, write nothing"
        )

    def handle(self, *args, file: str, dry_run: bool, **options) -> None:
        from inventory.sitefile.validate import SiteFileParseError, load_site_file

        try:
            doc = load_site_file(file)
        except (OSError, SiteFileParseError) as exc:
            raise CommandError(f"{file}: {exc}") from exc
        try:
            result = site_import(doc=doc, dry_run=dry_run)
        except DatabaseError as exc:
            # The validator should have caught it; the transaction rolled back all the same.
            raise CommandError(
                f"{file}: the database refused the import, nothing was written: {exc}"
            ) from exc
        except SiteImportError as exc:
            for line in exc.errors:
                self.stderr.write(line)
            raise CommandError(f"{file}: {len(exc.errors)} error(s); nothing was written") from exc
        self.stdout.write(result.summary())
        for change in result.tap_changes:
            self.stdout.write(f"tap change recorded: {change}")
