"""``generate_fleet --sites N --seed S [--jobs J] [--recompute]``: import the invented synthetic
fleet of ``fixtures.fleet`` (deterministic for a seed) for scale tests and benchmarks.

Each site goes through ``inventory.services.sites_import``, the one validated way in (ten sites
per transaction), so the fleet is exactly what an import of those site files gives (validation,
then ~5,000 rows of ~200 CTs and their history per site; ``bench_import`` measures it);
``--jobs`` imports in that many processes (sites are independent). The per-site recompute
requests are recorded but not sent (``recompute_deferred``); ``--recompute`` ends with one
fleet run, which satisfies them all.
"""

from __future__ import annotations

import multiprocessing
import time

from django.core.management.base import BaseCommand, CommandError
from django.db import connections

from analysis import services
from inventory.services import SiteImportError, sites_import
from record.gcpause import gc_paused

# Sites per transaction: the new rows of a chunk go in by one COPY per table (``sites_import``).
CHUNK = 10


def import_range(indexes: list[int], seed: int) -> tuple[int, int, float]:
    """Import the fleet sites at ``indexes``, ``CHUNK`` per transaction; (sites, CTs,
    seconds)."""
    from fixtures.fleet import generate_site

    t0 = time.perf_counter()
    cts = 0
    with services.recompute_deferred():
        for start in range(0, len(indexes), CHUNK):
            with gc_paused():
                docs = [generate_site(index, seed=seed) for index in indexes[start : start + CHUNK]]
                try:
                    sites_import(docs=[(doc["site"]["code"], doc) for doc in docs])
                except SiteImportError as exc:
                    raise RuntimeError(f"generated sites rejected:\n{exc}") from exc
                cts += sum(len(doc.get("cts", [])) for doc in docs)
    connections.close_all()
    return len(indexes), cts, time.perf_counter() - t0


class Command(BaseCommand):
    help = "Import an invented synthetic fleet (fixtures.fleet) for scale tests and benchmarks."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--sites", type=int, required=True)
        parser.add_argument("--seed", type=int, default=1)
        parser.add_argument("--jobs", type=int, default=1, help="import processes")
        parser.add_argument("--recompute", action="store_true", help="end with a fleet recompute")

    def handle(self, *args, sites: int, seed: int, jobs: int, recompute: bool, **options):
        if sites < 1:
            raise CommandError("--sites must be at least 1")
        t0 = time.perf_counter()
        summary = generate(sites=sites, seed=seed, jobs=jobs)
        took = time.perf_counter() - t0
        self.stdout.write(
            f"imported {summary[0]} sites, {summary[1]} CTs in {took:.1f} s "
            f"({took / max(summary[0], 1):.2f} s per site, {jobs} process(es))"
        )
        if recompute:
            from django.core.management import call_command

            call_command("recompute", "--wait", stdout=self.stdout)


def generate(*, sites: int, seed: int, jobs: int = 1) -> tuple[int, int]:
    """Import fleet sites 0..sites-1 for ``seed`` in ``jobs`` processes; (sites, CTs)."""
    indexes = list(range(sites))
    if jobs <= 1:
        n, cts, _ = import_range(indexes, seed)
        return n, cts
    # Each process opens its own database connection; none may be inherited from here.
    connections.close_all()
    parts = [indexes[i::jobs] for i in range(jobs)]
    with multiprocessing.get_context("fork").Pool(jobs) as pool:
        done = pool.starmap(import_range, [(part, seed) for part in parts])
    return sum(d[0] for d in done), sum(d[1] for d in done)
