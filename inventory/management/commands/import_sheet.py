"""``manage.py import_sheet FILE [--sheet NAME] [--kind cts|tap_changes] [--dry-run]
[--mapping FILE]``: import a CT register or a tap-change log (XLSX or CSV) atomically.

Exit status 0 when imported (or, with ``--dry-run``, importable); 2 for an input error (a file
that cannot be read, a bad header or any bad row: every error is printed, nothing is written).
"""

from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError

from inventory.services import sheet_import
from inventory.sheets import SheetFileError, SheetImportError, guess_kind, load_mapping, read_path

INPUT_ERROR = 2


class Command(BaseCommand):
    help = (
        "Import a CT register or tap-change log (XLSX or CSV): all rows or none; every bad row "
        "is reported with its row number, column and value."
    )

    def add_arguments(self, parser) -> None:
        parser.add_argument("file", help="path of the .xlsx or .csv file")
        parser.add_argument("--sheet", help="the sheet to read (default: the first)")
        parser.add_argument(
            "--kind",
            choices=["cts", "tap_changes"],
            help="what the rows are (default: told from the headers)",
        )
        parser.add_argument("--dry-run", action="store_true", help="check and count, write nothing")
        parser.add_argument(
            "--mapping", help="YAML or JSON file: your headers -> column names (null ignores one)"
        )
        parser.add_argument("--no-progress", action="store_true", help="no progress bar")

    def handle(self, *args, file: str, sheet, kind, dry_run, mapping, no_progress, **options):
        from tqdm import tqdm

        try:
            columns = load_mapping(mapping) if mapping else None
            table = read_path(file, sheet=sheet)
        except (OSError, ValueError, SheetFileError) as exc:
            raise CommandError(str(exc), returncode=INPUT_ERROR) from exc
        kind = kind or guess_kind(table.headers, columns)
        bar = None if no_progress else tqdm(total=0, unit="site", file=self.stderr, leave=False)

        def progress(done: int, total: int) -> None:
            if bar is not None:
                bar.total = total
                bar.update(done - bar.n)

        try:
            result = sheet_import(
                table=table, kind=kind, mapping=columns, dry_run=dry_run, progress=progress
            )
        except SheetImportError as exc:
            for error in exc.errors:
                self.stderr.write(str(error))
            raise CommandError(
                f"{file}: {len(exc.errors)} error(s); nothing was written", returncode=INPUT_ERROR
            ) from exc
        finally:
            if bar is not None:
                bar.close()
        self.stdout.write(result.summary())
        for change in result.tap_changes:
            self.stdout.write(f"tap change recorded: {change}")
