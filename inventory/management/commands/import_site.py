"""``manage.py import_site FILE [--dry-run]``: load a site file (JSON or YAML) atomically.

Exit status: 0 when imported (or, with ``--dry-run``, importable); 2 for any input error (a
file that cannot be read or parsed, a site file with errors, history it would rewrite), with
the errors on stderr (the first ``SITE_FILE_MAX_ERRORS_SHOWN`` and a count of the rest) and
nothing written."""

from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError
from django.db import DatabaseError

from inventory.services import SiteImportError, site_import
from inventory.sitefile.files import capped, read_site_file
from inventory.sitefile.validate import SiteFileParseError

EXIT_INPUT = 2  # the status of every input error, as the analysis commands (README)


class Command(BaseCommand):
    help = (
        "Import (upsert) a loopkeep.site/1 file. Nothing is written if any error is found. "
        "Exit status: 0, or 2 for an input error (every error on stderr)."
    )

    def add_arguments(self, parser) -> None:
        parser.add_argument("file", help="path of the site file (.json, .yaml or .yml)")
        parser.add_argument(
            "--dry-run", action="store_true", help="validate and report, write nothing"
        )

    def handle(self, *args, file: str, dry_run: bool, **options) -> None:
        try:
            doc = read_site_file(file)
        except SiteFileParseError as exc:
            lines = str(exc).splitlines() or [file]
            for line in capped(lines[1:]):
                self.stderr.write(line)
            raise CommandError(lines[0], returncode=EXIT_INPUT) from exc
        try:
            result = site_import(doc=doc, dry_run=dry_run)
        except DatabaseError as exc:
            # The validator should have caught it; the transaction rolled back all the same.
            raise CommandError(
                f"{file}: the database refused the import, nothing was written: {exc}",
                returncode=EXIT_INPUT,
            ) from exc
        except SiteImportError as exc:
            for line in capped(exc.errors):
                self.stderr.write(line)
            raise CommandError(
                f"{file}: {len(exc.errors)} error(s); nothing was written", returncode=EXIT_INPUT
            ) from exc
        self.stdout.write(result.summary())
        for change in result.tap_changes:
            self.stdout.write(f"tap change recorded: {change}")
