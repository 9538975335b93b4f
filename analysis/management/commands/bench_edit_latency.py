"""``bench_edit_latency [--workers 2] [--edits 5] [--site CODE] [--no-fleet]``: how long one edit
waits for its results (PostgreSQL and a broker required; a measurement, not a test).

Starts the workers of deploy/systemd (one process on ``recompute``, ``--workers`` processes on
``fleet,recompute``; ``--shared``: only the latter, no process kept for edits), then changes the
tap of one CT of one site ``--edits`` times (through ``ct_change_tap``, the service the API
calls) and times each from the commit to the moment the site's stored results are fresh (its
``SiteComputation`` at the new revision), first with the workers idle, then while a fleet run of
every site is under way (config/settings/base.py: the queues and priorities).
The fleet run is stopped after the edits (its remaining messages purged, the run marked failed).

``--cost-sites N`` first recomputes N sites in this process (read, engine, write: what a worker
does per chunk) and prints the CPU seconds per site next to the wall time: on a loaded machine
the wall time says more about the neighbours than about the work, the CPU time does not, and it
is what the sizing in README "Deployment" extrapolates from.
"""

from __future__ import annotations

import os
import signal
import statistics
import subprocess
import sys
import time

from django.conf import settings
from django.core.management.base import BaseCommand, CommandError
from django.db import connection, transaction
from django.utils import timezone

from analysis import selectors, services
from analysis.models import AnalysisRun, RunStatus
from inventory import models as inv
from inventory.services import ct_change_tap

TIMEOUT_S = 120.0


def _cpu_s(pid: int) -> float | None:
    """User + system CPU seconds of a local process (None when it is not on this host)."""
    try:
        fields = open(f"/proc/{pid}/stat").read().rsplit(")", 1)[1].split()  # noqa: SIM115
    except OSError:
        return None
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


class Command(BaseCommand):
    help = "Benchmark the latency of one edit's recompute, idle and during a fleet run."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--workers", type=int, default=2)
        parser.add_argument("--edits", type=int, default=5)
        parser.add_argument("--site", default="")
        parser.add_argument("--no-fleet", action="store_true", help="only the idle figures")
        parser.add_argument("--shared", action="store_true", help="no worker kept for edits")
        parser.add_argument("--cost-sites", type=int, default=0, help="CPU cost sample, sites")
        parser.add_argument("--cost-only", action="store_true", help="only the CPU cost sample")

    def handle(self, *args, workers: int, edits: int, site: str, no_fleet: bool, **kw) -> None:
        if connection.vendor != "postgresql" or not settings.CELERY_BROKER_URL:
            raise CommandError("bench_edit_latency needs PostgreSQL and a broker")
        if kw["cost_sites"]:
            self._cost(kw["cost_sites"])
        if kw["cost_only"]:
            return
        from config.celery import app

        target = (
            inv.Site.objects.get(code=site) if site else inv.Site.objects.order_by("pk").first()
        )
        if target is None:
            raise CommandError("no site: import one (generate_fleet) first")
        ct = inv.CurrentTransformer.objects.filter(site=target).order_by("code").first()
        if ct is None:
            raise CommandError(f"site {target.code} has no CT to change")
        sites = inv.Site.objects.count()
        app.control.purge()
        settings_module = os.environ.get("DJANGO_SETTINGS_MODULE", "config.settings.local")
        env = {**os.environ, "DJANGO_SETTINGS_MODULE": settings_module}
        groups = [("fleet", "fleet,recompute", workers)]
        if not kw["shared"]:
            groups.append(("edits", "recompute", 1))
        procs = [
            subprocess.Popen(self._worker_argv(name, queues, n), env=env)
            for name, queues, n in groups
        ]
        label = ", ".join(f"{q}: {n} process(es)" for _, q, n in groups)
        try:
            for worker in procs:
                self._wait_ready(app, worker, len(procs))
            self._edit(ct, target.code)  # warm-up: imports, connections, first compute
            idle = [self._edit(ct, target.code) for _ in range(edits)]
            self._report("idle", idle, label)
            if not no_fleet:
                run = services.fleet_recompute(force=True, on_commit=False)
                self._wait(lambda: self._done(run.pk) > 0, "the fleet run's first chunk")
                busy, progress = [], []
                for _ in range(edits):
                    busy.append(self._edit(ct, target.code))
                    progress.append(self._done(run.pk))
                self._report(f"during a fleet run of {sites} sites", busy, label)
                self.stdout.write(f"  fleet sites done at each edit: {progress}")
                app.control.purge()
                AnalysisRun.objects.filter(pk=run.pk).exclude(status=RunStatus.SUCCESS).update(
                    status=RunStatus.FAILURE,
                    finished_at=timezone.now(),
                    error="stopped by bench_edit_latency\n",
                )
        finally:
            for worker in procs:
                worker.send_signal(signal.SIGTERM)
            for worker in procs:
                try:
                    worker.wait(120)
                except subprocess.TimeoutExpired:
                    worker.kill()

    @staticmethod
    def _worker_argv(name: str, queues: str, processes: int) -> list[str]:
        return [
            *(sys.executable, "-m", "celery", "-A", "config", "worker", "--loglevel=WARNING"),
            *("-n", f"{name}@%h", "-Q", queues, f"--concurrency={processes}"),
            *("--prefetch-multiplier=1", "-O", "fair", "--without-gossip", "--without-mingle"),
        ]

    def _cost(self, n: int) -> None:
        ids = list(inv.Site.objects.order_by("pk").values_list("pk", flat=True)[:n])
        chunks = services.fleet_chunks(ids)
        cts = inv.CurrentTransformer.objects.filter(site_id__in=ids).count()
        connection.ensure_connection()
        backend = connection.connection.info.backend_pid  # the PostgreSQL server process
        db0, cpu0, wall0 = _cpu_s(backend), time.process_time(), time.perf_counter()
        for chunk in chunks:
            services.chunk_recompute(run_id=None, index=0, site_ids=chunk, force=True)
        cpu, wall = time.process_time() - cpu0, time.perf_counter() - wall0
        db1 = _cpu_s(backend)
        db = db1 - db0 if db0 is not None and db1 is not None else float("nan")
        n = len(ids)
        self.stdout.write(
            f"recompute cost, {n} sites ({cts} CTs) in {len(chunks)} chunks, one process: "
            f"{cpu / n:.3f} CPU s per site in the worker, {db / n:.3f} in the PostgreSQL "
            f"server process (same host: /proc), {wall / n:.3f} wall s per site "
            f"(worker CPU {cpu:.1f} s, server CPU {db:.1f} s, wall {wall:.1f} s)"
        )

    def _edit(self, ct: inv.CurrentTransformer, code: str) -> float:
        names = sorted(inv.Terminal.objects.filter(ct=ct).values_list("name", flat=True))
        roles = dict(
            inv.Terminal.objects.filter(ct=ct, tap_role__in=("first", "second")).values_list(
                "tap_role", "name"
            )
        )
        # X1-X5 <-> X2-X5 on the fleet's multi-ratio CTs: another terminal, same second one.
        first = next(n for n in names if n not in (roles["first"], roles["second"]))
        with transaction.atomic():
            ct_change_tap(ct=ct, to=(first, roles["second"]), by="bench", move_leads=True)
        t0 = time.perf_counter()
        self._wait(lambda: selectors.site_status(site=code)["stale"] is False, "fresh results")
        return time.perf_counter() - t0

    @staticmethod
    def _done(run_id: int) -> int:
        return AnalysisRun.objects.filter(pk=run_id).values_list("sites_done", flat=True).get()

    @staticmethod
    def _wait(check, what: str) -> None:
        deadline = time.monotonic() + TIMEOUT_S
        while time.monotonic() < deadline:
            if check():
                return
            time.sleep(0.02)
        raise CommandError(f"timed out after {TIMEOUT_S:.0f} s waiting for {what}")

    def _wait_ready(self, app, worker: subprocess.Popen, count: int) -> None:
        deadline = time.monotonic() + TIMEOUT_S
        while time.monotonic() < deadline:
            if worker.poll() is not None:
                raise CommandError(f"the worker exited with {worker.returncode}")
            if len(app.control.ping(timeout=1.0)) >= count:
                return
        raise CommandError("no worker answered")

    def _report(self, label: str, seconds: list[float], workers: str) -> None:
        self.stdout.write(
            f"edit -> fresh results, {label}, workers {workers}, {len(seconds)} "
            f"edits: median {statistics.median(seconds):.2f} s, max {max(seconds):.2f} s "
            f"({', '.join(f'{s:.2f}' for s in seconds)})"
        )
