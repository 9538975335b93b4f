"""``bench_fleet [--sites 500] [--seed 1] [--workers 2]``: the fleet recompute benchmark of
issue 15 (PostgreSQL and a broker required; a measurement, not a test).

(a) End to end: a fleet run through the broker on ``--workers`` Celery worker processes started
    here, from sending the run to the run row saying success (read with ``site_records``,
    engine, COPY of the results, outbox and progress bookkeeping).
(b) The floor, in the same run: one raw SQL read of the same record rows (one ``SELECT`` per
    table), the engine's compute of every site (timed in one process and divided by the number
    of workers: perfect parallelism, so the floor is never overstated), and one COPY per result
    table of all result rows (into temporary copies of the tables, indexes included, rolled back).

Beside them: the typed-record read of every site (``site_records`` in the workers' chunks,
one process) against the raw read of the same rows, wall and CPU.

Prints the figures and the targets: (a) ≤ 20 s with 2 workers, (a)/(b) ≤ 2, worker peak
memory ≤ 300 MB, the engine's compute of all sites in one process ≤ 20 s, the typed-record
read within 2× of the raw read. Wall-clock figures on a shared machine are loaded: the CPU
figures beside them are the steadier comparison.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

from django.conf import settings
from django.core.management.base import BaseCommand, CommandError
from django.db import connection, transaction
from django.utils import timezone

from analysis import services
from analysis.models import AnalysisRun, RunStatus
from inventory.models import Site

STALL_S = 15.0

# Issue 15's targets.
TARGET_END_TO_END_S = 20.0
TARGET_RATIO_TO_FLOOR = 2.0
TARGET_WORKER_PEAK_MB = 300.0
TARGET_COMPUTE_ONE_PROCESS_S = 20.0
TARGET_RECORD_OVER_RAW = 2.0

RECORD_TABLES = (
    "inventory_site",
    "inventory_bus",
    "inventory_equipment",
    "inventory_terminalblock",
    "inventory_terminal",
    "inventory_tapchange",
    "inventory_currenttransformer",
    "inventory_device",
    "inventory_deviceinput",
    "inventory_deviceoutput",
    "inventory_wire",
    "inventory_link",
    "inventory_ground",
    "inventory_switch",
    "inventory_switchposition",
    "inventory_switchcontact",
    "inventory_procedure",
    "inventory_procedurestep",
)


def _children(pid: int) -> list[int]:
    try:
        text = Path(f"/proc/{pid}/task/{pid}/children").read_text()
    except OSError:
        return []
    return [int(x) for x in text.split()]


def _peak_rss_mb(pid: int) -> float | None:
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:
        return None
    return None


class Command(BaseCommand):
    help = "Benchmark the fleet recompute against its floor (PostgreSQL + broker)."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--sites", type=int, default=500)
        parser.add_argument("--seed", type=int, default=1)
        parser.add_argument("--workers", type=int, default=2)
        parser.add_argument("--jobs", type=int, default=2, help="import processes if generating")
        parser.add_argument("--json", action="store_true", help="print the figures as JSON")
        parser.add_argument(
            "--only-read",
            type=int,
            default=0,
            metavar="N",
            help="measure only the typed-record read against the raw read, N times (no broker, "
            "no workers, no compute)",
        )

    def handle(self, *args, sites: int, seed: int, workers: int, jobs: int, json: bool, **kw):
        if connection.vendor != "postgresql":
            raise CommandError("bench_fleet needs PostgreSQL (DATABASE_URL)")
        if kw["only_read"]:
            site_ids = list(Site.objects.order_by("pk").values_list("pk", flat=True))
            for _ in range(kw["only_read"]):
                read = self._read(site_ids)
                self.stdout.write(
                    f"typed-record read {read['record_read_s']} s, "
                    f"{read['record_read_cpu_s']} s CPU; raw read {read['b_raw_read_s']} s, "
                    f"{read['b_raw_read_cpu_s']} s CPU; over raw: wall "
                    f"{read['record_read_over_raw']}, CPU {read['record_read_over_raw_cpu']} "
                    f"(target ≤ {TARGET_RECORD_OVER_RAW:g}; {len(site_ids)} sites)"
                )
            return
        if not settings.CELERY_BROKER_URL:
            raise CommandError("bench_fleet needs a broker (CELERY_BROKER_URL)")
        from config.celery import app

        have = Site.objects.count()
        if have < sites:
            from analysis.management.commands.generate_fleet import generate

            self.stdout.write(f"generating the fleet: {have} sites present, {sites} wanted")
            t0 = time.perf_counter()
            generate(sites=sites, seed=seed, jobs=jobs)
            self.stdout.write(f"  imported in {time.perf_counter() - t0:.0f} s")
        site_ids = list(Site.objects.order_by("pk").values_list("pk", flat=True)[:sites])
        if len(site_ids) < Site.objects.count():
            raise CommandError(
                f"the database holds {Site.objects.count()} sites; bench a database of exactly "
                f"--sites ({sites}) so the fleet run and the floor cover the same rows"
            )
        figures: dict[str, Any] = {"sites": len(site_ids)}

        app.control.purge()
        worker = subprocess.Popen(
            [sys.executable, "-m", "celery", "-A", "config", "worker", "--loglevel=WARNING",
             f"--concurrency={workers}", "--prefetch-multiplier=1", "--without-gossip",
             "--without-mingle", "-O", "fair"],
            env={**os.environ, "DJANGO_SETTINGS_MODULE": os.environ.get(
                "DJANGO_SETTINGS_MODULE", "config.settings.local")},
        )  # fmt: skip
        try:
            self._wait_ready(app, worker)
            t0 = time.perf_counter()
            run = services.fleet_recompute(force=True, on_commit=False)
            peaks: dict[int, float] = {}
            resent = 0
            last = (-1, time.monotonic())
            while True:
                for child in _children(worker.pid):
                    peak = _peak_rss_mb(child)
                    if peak is not None:
                        peaks[child] = max(peaks.get(child, 0.0), peak)
                status, done = AnalysisRun.objects.filter(pk=run.pk).values_list(
                    "status", "sites_done"
                )[0]
                if status in (RunStatus.SUCCESS, RunStatus.FAILURE):
                    break
                if done != last[0]:
                    last = (done, time.monotonic())
                elif time.monotonic() - last[1] > STALL_S:
                    # The periodic sweep would do this after ten minutes; here after STALL_S.
                    resent += services.runs_sweep(stalled_s=STALL_S)
                    last = (done, time.monotonic())
                time.sleep(0.2)
            wall_a = time.perf_counter() - t0
        finally:
            worker.send_signal(signal.SIGTERM)
            worker.wait(120)
        run.refresh_from_db()
        if run.sites_done < run.sites_total:
            raise CommandError(f"fleet run {run.pk} {run.status}: {run.error[:2000]}")
        if run.sites_failed:
            # Sites the engine raised on: counted in both (a) and (b), written in neither.
            self.stderr.write(
                f"{run.sites_failed} site(s) failed in the engine:\n{run.error[:1500]}"
            )
        figures.update(
            a_end_to_end_s=round(wall_a, 2),
            a_run_row_s=round(run.duration_s or 0.0, 2),
            a_read_s_summed=round(run.read_s, 2),
            a_compute_s_summed=round(run.compute_s, 2),
            a_write_s_summed=round(run.write_s, 2),
            cts=run.cts,
            circuits=run.circuits,
            findings=run.findings,
            sites_failed=run.sites_failed,
            stalled_chunks_resent=resent,
            verdicts=run.verdicts,
            workers=workers,
            worker_peak_rss_mb=sorted(round(v) for v in peaks.values()),
        )
        figures.update(self._floor(site_ids, workers))
        floor = figures["b_floor_s"]
        figures["ratio_a_over_b"] = round(wall_a / floor, 2) if floor else None
        if json:
            import json as json_module

            self.stdout.write(json_module.dumps(figures, indent=2))
            return
        for key, value in figures.items():
            self.stdout.write(f"{key:>30}: {value}")
        self.stdout.write("targets (issue 15; wall clock on a shared machine, loaded):")
        for line in _targets(figures):
            self.stdout.write(f"  {line}")

    def _wait_ready(self, app, worker: subprocess.Popen, timeout_s: float = 60.0) -> None:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if worker.poll() is not None:
                raise CommandError(f"the worker exited with {worker.returncode}")
            if app.control.ping(timeout=1.0):
                return
        raise CommandError("the worker did not answer a ping within a minute")

    def _read(self, site_ids: list[int]) -> dict[str, Any]:
        """The raw read of the record rows, then the typed records read as the workers read
        them (chunk by chunk): figures, and the records (``records``, the engine's input)."""
        from inventory.selectors import site_records

        t0, c0 = time.perf_counter(), time.process_time()
        rows = 0
        with connection.cursor() as cursor:
            for table in RECORD_TABLES:
                cursor.execute(f"SELECT * FROM {table}")
                rows += len(cursor.fetchall())
        read_s, read_cpu_s = time.perf_counter() - t0, time.process_time() - c0

        # The typed records, read as the workers read them (chunk by chunk): the engine's input.
        records = {}
        t0, c0 = time.perf_counter(), time.process_time()
        for chunk in services.fleet_chunks(site_ids):
            records.update(site_records(chunk))
        record_s, record_cpu_s = time.perf_counter() - t0, time.process_time() - c0

        return {
            "records": records,
            "raw_read_s": read_s,
            "b_raw_read_s": round(read_s, 2),
            "b_raw_read_cpu_s": round(read_cpu_s, 2),
            "b_record_rows": rows,
            "record_read_s": round(record_s, 2),
            "record_read_cpu_s": round(record_cpu_s, 2),
            "record_read_over_raw": round(record_s / read_s, 2) if read_s else None,
            "record_read_over_raw_cpu": round(record_cpu_s / read_cpu_s, 2) if read_cpu_s else None,
        }

    def _floor(self, site_ids: list[int], workers: int) -> dict[str, Any]:
        read = self._read(site_ids)
        records, read_s = read.pop("records"), read.pop("raw_read_s")

        codes = {sid: (r.site.code, 0) for sid, r in records.items()}
        t1, c1 = time.perf_counter(), time.process_time()
        results, _failed = services._compute(records)
        compute_one_s, compute_one_cpu_s = time.perf_counter() - t1, time.process_time() - c1

        t2 = time.perf_counter()
        result_rows = services._result_rows(results, codes, timezone.now(), None)
        n = 0
        with transaction.atomic():
            for model, model_rows in result_rows.items():
                table = model._meta.db_table
                with connection.cursor() as cursor:
                    cursor.execute(
                        f"CREATE TEMP TABLE floor_{table} (LIKE {table} INCLUDING ALL) "
                        "ON COMMIT DROP"
                    )
                services._insert(model, model_rows, table=f"floor_{table}")
                n += len(model_rows)
            copy_s = time.perf_counter() - t2
            transaction.set_rollback(True)
        compute_s = compute_one_s / workers
        return {
            **read,
            "b_compute_one_process_s": round(compute_one_s, 2),
            "b_compute_one_process_cpu_s": round(compute_one_cpu_s, 2),
            "b_compute_s": round(compute_s, 2),
            "b_copy_s": round(copy_s, 2),
            "b_result_rows": n,
            "b_floor_s": round(read_s + compute_s + copy_s, 2),
        }


def _targets(figures: dict[str, Any]) -> list[str]:
    """One line per target of issue 15: the figure, the target, met or not."""

    def line(what: str, value: float | None, target: float, unit: str = "") -> str:
        verdict = "NOT met" if value is None or value > target else "met"
        return f"{what}: {value}{unit} (target ≤ {target:g}{unit}) → {verdict}"

    peak = max(figures["worker_peak_rss_mb"], default=None)
    return [
        line(f"(a) end to end, {figures['workers']} workers", figures["a_end_to_end_s"],
             TARGET_END_TO_END_S, " s"),
        line("(a)/(b), end to end over the floor", figures["ratio_a_over_b"],
             TARGET_RATIO_TO_FLOOR),
        line("worker peak memory", peak, TARGET_WORKER_PEAK_MB, " MB"),
        line("engine compute of all sites, one process", figures["b_compute_one_process_s"],
             TARGET_COMPUTE_ONE_PROCESS_S, " s"),
        line(f"typed-record read over raw read, wall ({figures['record_read_s']} s vs "
             f"{figures['b_raw_read_s']} s)", figures["record_read_over_raw"],
             TARGET_RECORD_OVER_RAW),
        line(f"typed-record read over raw read, CPU ({figures['record_read_cpu_s']} s vs "
             f"{figures['b_raw_read_cpu_s']} s)", figures["record_read_over_raw_cpu"],
             TARGET_RECORD_OVER_RAW),
    ]  # fmt: skip
