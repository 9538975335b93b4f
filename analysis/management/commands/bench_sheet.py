"""``bench_sheet [--sites 500] [--seed 1] [--format xlsx]``: the spreadsheet import benchmark
(a measurement, not a test; PostgreSQL for the COPY floor).

The invented fleet of ``fixtures.fleet`` (500 sites, about 100,000 CTs): each site is stored
first with its buses and equipment only (not timed), and its CTs are written as one fleet CT
register (the columns ``import_sheet`` reads; not timed). Then, in one process:

(a) the import: the file read (calamine), every row parsed, applied to its site's file, checked
    by the site-file validator and written by the site-file importer (history included), all
    sites in one transaction, as ``import_sheet`` does;
(b) the floor, in the same run: a COPY of the very rows (a) wrote (CTs, terminals, their history
    rows, site revisions aside) into copies of those tables;
(c) the same file imported again: every row checked, nothing to write.

Target (design.md): (a) <= 60 s for 100,000 rows. Run it on a database holding no fleet site.
"""

from __future__ import annotations

import io
import os
import tempfile
import time
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError
from django.db import connection, transaction

from analysis import services
from inventory import models
from inventory.sheets import import_table, read_path
from inventory.sheets.writer import CT_HEADERS, write_table
from trade.taps import format_tap, format_terminals

_SKELETON = ("format", "site", "buses", "equipment")
_WRITTEN = (models.CurrentTransformer, models.Terminal)


def _register_rows(doc: dict) -> list[list]:
    site = doc["site"]["code"]
    return [
        [
            site,
            c["equipment"],
            c["code"],
            c["phase"],
            c.get("set"),
            c["secondary_a"],
            format_terminals(c["terminals"]),
            format_tap(c["in_use"]),
            c.get("accuracy"),
            c.get("rated_burden_va"),
            c.get("winding_ohm"),
            c.get("rating_factor", 1),
            c.get("nameplate"),
        ]
        for c in doc.get("cts", [])
    ]


class Command(BaseCommand):
    help = "Benchmark the CT register import against a COPY of the same rows (figures)."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--sites", type=int, default=500)
        parser.add_argument("--seed", type=int, default=1)
        parser.add_argument("--format", choices=["xlsx", "csv"], default="xlsx")

    def handle(self, *args, sites: int, seed: int, format: str, **options) -> None:
        from fixtures.fleet import generate_site
        from inventory.services import site_import

        if sites < 1:
            raise CommandError("--sites must be at least 1")
        codes = [f"S{i + 1:04d}" for i in range(sites)]
        if models.Site.objects.filter(code__in=codes).exists():
            raise CommandError("the database already holds fleet sites; run on an empty database")
        postgres = connection.vendor == "postgresql"

        t0 = time.perf_counter()
        rows: list[list] = []
        with services.recompute_deferred():
            for index in range(sites):
                doc = generate_site(index, seed=seed)
                rows += _register_rows(doc)
                site_import(doc={k: doc[k] for k in _SKELETON if k in doc})
        with tempfile.TemporaryDirectory(prefix="bench_sheet_") as tmp:
            path = Path(tmp) / f"fleet-register.{format}"
            path.write_bytes(write_table(CT_HEADERS, rows, fmt=format, sheet="CT register"))
            size_mb = path.stat().st_size / 1024 / 1024
            self.stdout.write(
                f"set-up (not timed): {sites} sites stored with buses and equipment, a register "
                f"of {len(rows)} CTs written ({format}, {size_mb:.1f} MB) in "
                f"{time.perf_counter() - t0:.1f} s"
            )
            before = {m: self._max_ids(m) for m in _WRITTEN}

            server0 = self._server_cpu()
            c0, t0 = time.process_time(), time.perf_counter()
            table = read_path(path)
            read_s = time.perf_counter() - t0
            with services.recompute_deferred():
                result = import_table(table, kind="cts")
            import_s = time.perf_counter() - t0
            cpu_s, server_s = time.process_time() - c0, self._server_cpu() - server0
            self.stdout.write(
                f"(a) import: {result.rows} rows in {import_s:.1f} s (reading the file "
                f"{read_s:.1f} s); CPU: this process {cpu_s:.1f} s, its database session "
                f"{server_s:.1f} s; {result.summary()}"
            )

            t0 = time.perf_counter()
            table = read_path(path)
            with services.recompute_deferred():
                again = import_table(table, kind="cts")
            again_s = time.perf_counter() - t0
            self.stdout.write(f"(c) the same file again: {again_s:.1f} s; {again.summary()}")
        if not postgres:
            self.stdout.write("(b) COPY floor: PostgreSQL only")
            return
        copy_s, n_rows = self._copy_floor(before)
        self.stdout.write(f"(b) COPY floor: the same {n_rows} rows in {copy_s:.1f} s")
        self.stdout.write(
            f"ratio (a)/(b) = {import_s / copy_s:.1f}; (a) "
            f"{'meets' if import_s <= 60 * len(rows) / 100_000 else 'misses'} the 60 s per "
            "100,000 rows target"
        )

    @staticmethod
    def _server_cpu() -> float:
        """CPU seconds of this connection's database backend so far (PostgreSQL on this
        machine, read from /proc; 0 where that cannot be read). Wall times on a machine shared
        with other work mostly measure the others; CPU times say what this work costs."""
        if connection.vendor != "postgresql":
            return 0.0
        with connection.cursor() as cursor:
            cursor.execute("SELECT pg_backend_pid()")
            pid = cursor.fetchone()[0]
        try:
            fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            return 0.0
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")

    @staticmethod
    def _max_ids(model) -> dict[str, tuple[str, int]]:
        out = {}
        with connection.cursor() as cursor:
            for m in (model, model.history.model):
                pk = m._meta.pk.column
                cursor.execute(f'SELECT coalesce(max("{pk}"), 0) FROM "{m._meta.db_table}"')
                out[m._meta.db_table] = (pk, cursor.fetchone()[0])
        return out

    @staticmethod
    def _copy_floor(before: dict) -> tuple[float, int]:
        """COPY the rows the import wrote (dumped first, not timed) into scratch copies of
        their tables, one transaction; (seconds, rows)."""
        dumps = []
        with connection.cursor() as cursor:
            for tables in before.values():
                for table, (pk, start) in tables.items():
                    cursor.execute(
                        "SELECT string_agg(quote_ident(attname), ', ' ORDER BY attnum) "
                        "FROM pg_attribute WHERE attrelid = %s::regclass AND attnum > 0 "
                        "AND NOT attisdropped",
                        [table],
                    )
                    cols = cursor.fetchone()[0]
                    buf = io.BytesIO()
                    with cursor.cursor.copy(
                        f'COPY (SELECT {cols} FROM "{table}" WHERE "{pk}" > {int(start)}) TO STDOUT'
                    ) as copy:
                        for block in copy:
                            buf.write(block)
                    scratch = f"bench_sheet_{table}"
                    cursor.execute(f'DROP TABLE IF EXISTS "{scratch}"')
                    cursor.execute(f'CREATE TABLE "{scratch}" (LIKE "{table}" INCLUDING ALL)')
                    dumps.append((scratch, cols, buf.getvalue()))
        try:
            t0 = time.perf_counter()
            with transaction.atomic(), connection.cursor() as cursor:
                for scratch, cols, data in dumps:
                    with cursor.cursor.copy(f'COPY "{scratch}" ({cols}) FROM STDIN') as copy:
                        copy.write(data)
            copy_s = time.perf_counter() - t0
        finally:
            with connection.cursor() as cursor:
                for scratch, _, _ in dumps:
                    cursor.execute(f'DROP TABLE IF EXISTS "{scratch}"')
        return copy_s, sum(d[2].count(b"\n") for d in dumps)
