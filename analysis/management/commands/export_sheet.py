"""``manage.py export_sheet --kind cts|findings|tap_changes [--site S] FILE.xlsx|FILE.csv``:
the CT register (the columns ``import_sheet`` reads, so export → import changes nothing), the
findings with their numbers, or the tap-change log. Exit 0, or 2 for a usage or input error."""

from __future__ import annotations

from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from analysis.sheets import FINDING_HEADERS, finding_rows
from inventory.models import Site
from inventory.sheets.writer import (
    CT_HEADERS,
    TAP_CHANGE_HEADERS,
    ct_register_rows,
    tap_change_rows,
    write_table,
)

INPUT_ERROR = 2
SHEETS = {
    "cts": ("CT register", CT_HEADERS, ct_register_rows),
    "findings": ("Findings", FINDING_HEADERS, finding_rows),
    "tap_changes": ("Tap changes", TAP_CHANGE_HEADERS, tap_change_rows),
}


class Command(BaseCommand):
    help = "Write the CT register, the findings or the tap-change log as XLSX or CSV."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--kind", choices=sorted(SHEETS), required=True)
        parser.add_argument("--site", help="one site (default: every site)")
        parser.add_argument("file", help="output file, .xlsx or .csv")
        parser.add_argument("--no-progress", action="store_true", help="no progress bar")

    def handle(self, *args, kind: str, site: str | None, file: str, no_progress: bool, **options):
        from tqdm import tqdm

        fmt = Path(file).suffix.lower().lstrip(".")
        if fmt not in ("xlsx", "csv"):
            raise CommandError(
                f"{file}: the file name must end in .xlsx or .csv", returncode=INPUT_ERROR
            )
        if site and not Site.objects.filter(code=site).exists():
            raise CommandError(f"no site {site!r}", returncode=INPUT_ERROR)
        title, headers, rows = SHEETS[kind]
        bar = None if no_progress else tqdm(unit="row", file=self.stderr, leave=False)

        def progress(n: int) -> None:
            if bar is not None:
                bar.update(n - bar.n)

        try:
            data = write_table(headers, rows(site=site), fmt=fmt, sheet=title, progress=progress)
        finally:
            if bar is not None:
                bar.close()
        Path(file).write_bytes(data)
        self.stdout.write(f"wrote {file} ({title}, {len(data)} bytes)")
