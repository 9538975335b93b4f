"""``prune_results [--keep-days N]``: remove finished runs, their chunks and done outbox rows
older than N days (``LOOPKEEP_PRUNE_KEEP_DAYS``, 30) and the results of deleted sites. Beat runs
it daily (``analysis.prune_results``)."""

from __future__ import annotations

from django.conf import settings
from django.core.management.base import BaseCommand, CommandError

from analysis.retention import results_prune


class Command(BaseCommand):
    help = "Remove old run, chunk and outbox rows and the results of deleted sites."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--keep-days", type=int, default=None)

    def handle(self, *args, keep_days: int | None, **options) -> None:
        days = settings.LOOPKEEP_PRUNE_KEEP_DAYS if keep_days is None else keep_days
        try:
            counts = results_prune(keep_days=days)
        except ValueError as exc:
            raise CommandError(str(exc)) from exc
        total = sum(counts.values())
        detail = ", ".join(f"{name} {n}" for name, n in counts.items() if n)
        self.stdout.write(
            f"pruned {total} rows (kept {days} days){': ' + detail if detail else ''}"
        )
