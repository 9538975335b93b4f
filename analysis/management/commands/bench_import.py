"""``bench_import [--sites 500] [--seed 1] [--jobs 2] [--chunk 10]``: the fleet import benchmark (a
measurement, not a test; PostgreSQL for the COPY floor).

(a) The import: the invented fleet of ``fixtures.fleet``, written first as site files (JSON, not
    timed), then read, validated and written by ``inventory.services.sites_import`` (the one
    validated way in, ``site_import`` for ``--chunk`` files per transaction: history and
    tap-change events included) in ``--jobs`` processes, from the first file opened to the last
    commit. Recompute requests are recorded, not sent.
(b) The floor, in the same run: a COPY of the very rows (a) wrote, every inventory table and
    its history table, into copies of those tables (indexes and checks included, no foreign
    keys), split over the same number of processes, each in one transaction.

Prints both, their ratio (targets: (a) <= 60 s for 500 sites with 2 processes, (a)/(b) <= 3),
the rows written, the peak resident memory of each import process, and the CPU time per site of
the importing processes and of their database server processes (read from /proc when the
server runs on this machine: on a shared machine the wall times depend on the load, CPU times
much less). The database must not
hold any of the fleet's site codes yet (run it on an empty database); the imported fleet stays.
"""

from __future__ import annotations

import io
import json
import multiprocessing
import os
import resource
import tempfile
import time
from pathlib import Path

from django.apps import apps
from django.core.management.base import BaseCommand, CommandError
from django.db import connection, connections, transaction

from analysis import services
from inventory.models import Site


def _server_cpu_s() -> float | None:
    """CPU seconds the database server process of this connection has used so far, when it
    runs on this machine and /proc shows it (the machine is shared: CPU time is the figure
    that compares across runs, where wall time depends on the load); None otherwise."""
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_backend_pid()")
        pid = cursor.fetchone()[0]
    try:
        with open(f"/proc/{pid}/stat") as stat:
            fields = stat.read().rsplit(")", 1)[1].split()
    except OSError:
        return None
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def _spent(start: float | None) -> float | None:
    end = _server_cpu_s()
    return None if start is None or end is None else end - start


def _import_files(paths: list[str], chunk: int) -> tuple[int, int, int, float, float | None]:
    """Import the site files at ``paths`` in this process, ``chunk`` files per transaction;
    (sites, CTs, peak RSS in KiB, CPU seconds of this process and of its server process)."""
    from inventory.services import sites_import
    from inventory.sitefile.files import read_site_file
    from record.gcpause import gc_paused

    cts = 0
    cpu, server = time.process_time(), _server_cpu_s()
    with services.recompute_deferred():
        for start in range(0, len(paths), chunk):
            with gc_paused():
                docs = [(path, read_site_file(path)) for path in paths[start : start + chunk]]
                sites_import(docs=docs)
                cts += sum(len(doc.get("cts", [])) for _, doc in docs)
    cpu, server = time.process_time() - cpu, _spent(server)
    connections.close_all()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return len(paths), cts, peak, cpu, server


def _copy_in(parts: list[tuple[str, str, bytes]]) -> tuple[int, float | None]:
    """COPY each ``(table, columns, text)`` in one transaction; (rows written, CPU seconds of
    the server process)."""
    rows = 0
    server = _server_cpu_s()
    with transaction.atomic(), connection.cursor() as cursor:
        for table, cols, data in parts:
            with cursor.cursor.copy(f"COPY {table} ({cols}) FROM STDIN") as copy:
                copy.write(data)
            rows += data.count(b"\n")
    server = _spent(server)
    connections.close_all()
    return rows, server


def _tables() -> list[tuple[str, str]]:
    """(table, primary key column) of every inventory model and its history."""
    return [
        (m._meta.db_table, m._meta.pk.column) for m in apps.get_app_config("inventory").get_models()
    ]


def _per_site(seconds: list[float | None], sites: int) -> str:
    if any(s is None for s in seconds):
        return "(not measured)"
    return f"{sum(s for s in seconds if s is not None) / sites * 1000:.0f} ms"


def _pool(jobs: int):
    # Each process opens its own connection; none may be inherited from here.
    connections.close_all()
    return multiprocessing.get_context("fork").Pool(jobs)


class Command(BaseCommand):
    help = "Benchmark the fleet import against a COPY of the same rows (figures, not a test)."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--sites", type=int, default=500)
        parser.add_argument("--seed", type=int, default=1)
        parser.add_argument("--jobs", type=int, default=2, help="import (and COPY) processes")
        parser.add_argument(
            "--chunk", type=int, default=10, help="site files per transaction of the import"
        )

    def handle(self, *args, sites: int, seed: int, jobs: int, chunk: int, **options) -> None:
        from fixtures.fleet import generate_site

        if sites < 1 or jobs < 1 or chunk < 1:
            raise CommandError("--sites, --jobs and --chunk must be at least 1")
        codes = [f"S{i + 1:04d}" for i in range(sites)]
        if Site.objects.filter(code__in=codes).exists():
            raise CommandError("the database already holds fleet sites; run on an empty database")
        postgres = connection.vendor == "postgresql"
        tables = _tables()
        before = {}
        if postgres:
            with connection.cursor() as cursor:
                for table, pk in tables:
                    cursor.execute(f'SELECT coalesce(max("{pk}"), 0) FROM "{table}"')
                    before[table] = cursor.fetchone()[0]

        with tempfile.TemporaryDirectory(prefix="bench_import_") as tmp:
            t0 = time.perf_counter()
            paths = []
            for index in range(sites):
                path = Path(tmp) / f"{codes[index]}.json"
                path.write_text(json.dumps(generate_site(index, seed=seed)))
                paths.append(str(path))
            gen_s = time.perf_counter() - t0
            self.stdout.write(f"generated {sites} site files in {gen_s:.1f} s (not timed)")

            t0 = time.perf_counter()
            parts = [(paths[i::jobs], chunk) for i in range(jobs)]
            if jobs == 1:
                done = [_import_files(*parts[0])]
            else:
                with _pool(jobs) as pool:
                    done = pool.starmap(_import_files, parts)
            import_s = time.perf_counter() - t0
        n_sites, n_cts = sum(d[0] for d in done), sum(d[1] for d in done)
        rss = ", ".join(f"{d[2] / 1024:.0f}" for d in done)
        self.stdout.write(
            f"(a) import: {n_sites} sites, {n_cts} CTs in {import_s:.1f} s "
            f"({import_s / n_sites * 1000:.0f} ms per site, {jobs} process(es), {chunk} site(s) "
            f"per transaction); CPU per site: {_per_site([d[3] for d in done], n_sites)} in "
            f"the importing processes, {_per_site([d[4] for d in done], n_sites)} in their "
            f"database server processes; peak RSS per process {rss} MiB"
        )
        if not postgres:
            self.stdout.write("(b) COPY floor: PostgreSQL only")
            return

        # The rows (a) wrote, as COPY text, table by table (not timed).
        dumps: list[tuple[str, str, list[bytes]]] = []
        n_rows = 0
        with connection.cursor() as cursor:
            for table, pk in tables:
                cursor.execute(
                    "SELECT string_agg(quote_ident(attname), ', ' ORDER BY attnum) "
                    "FROM pg_attribute WHERE attrelid = %s::regclass AND attnum > 0 "
                    "AND NOT attisdropped",
                    [table],
                )
                cols = cursor.fetchone()[0]
                buf = io.BytesIO()
                with cursor.cursor.copy(
                    f'COPY (SELECT {cols} FROM "{table}" WHERE "{pk}" > {int(before[table])}) '
                    "TO STDOUT"
                ) as copy:
                    for block in copy:
                        buf.write(block)
                lines = buf.getvalue().splitlines(keepends=True)
                n_rows += len(lines)
                if lines:
                    dumps.append((table, cols, lines))
            scratch = {table: f"bench_copy_{table}" for table, _ in tables}
            for table, _ in tables:
                cursor.execute(f'DROP TABLE IF EXISTS "{scratch[table]}"')
                cursor.execute(f'CREATE TABLE "{scratch[table]}" (LIKE "{table}" INCLUDING ALL)')
        work = [
            [
                (f'"{scratch[table]}"', cols, b"".join(lines[i::jobs]))
                for table, cols, lines in dumps
            ]
            for i in range(jobs)
        ]
        try:
            t0 = time.perf_counter()
            if jobs == 1:
                copied = [_copy_in(work[0])]
            else:
                with _pool(jobs) as pool:
                    copied = pool.map(_copy_in, work)
            copied_rows = sum(c[0] for c in copied)
            copy_s = time.perf_counter() - t0
        finally:
            with connection.cursor() as cursor:
                for table, _ in tables:
                    cursor.execute(f'DROP TABLE IF EXISTS "{scratch[table]}"')
        self.stdout.write(
            f"(b) COPY floor: the same {copied_rows} rows ({n_rows} dumped) in {copy_s:.1f} s "
            f"({jobs} process(es)); CPU per site: {_per_site([c[1] for c in copied], n_sites)} "
            "in the database server processes"
        )
        self.stdout.write(
            f"ratio (a)/(b) = {import_s / copy_s:.2f} (target <= 3); "
            f"(a) {'meets' if import_s <= 60 * sites / 500 else 'misses'} the 60 s per 500 "
            "sites target"
        )
