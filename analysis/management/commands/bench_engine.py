"""``manage.py bench_engine``: the circuit engine's benchmark (batched solves, a 30-step
procedure check, an isolation plan). Figures, not a test."""

from __future__ import annotations

from django.core.management.base import BaseCommand


class Command(BaseCommand):
    help = "Benchmark the circuit engine in memory and print the figures."

    def add_arguments(self, parser) -> None:
        parser.add_argument("args", nargs="*", help="passed to analysis.bench.engine")

    def handle(self, *args: str, **options) -> None:
        from analysis.bench import engine as bench

        bench.main(list(args))
