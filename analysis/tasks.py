"""Celery tasks of the analysis: a run (one site after an edit, chosen sites, or the fleet),
its chunks, and the two periodic sweeps.

Tasks take ids and call services; they are safe to run twice (``analysis.services`` writes each
site's results as one replaced block and counts a chunk once). ``RunTask`` moves the run row to
running, success or failure. Retries are bounded and only for transient errors: a database
connection lost or a broker that cannot be reached.
"""

from __future__ import annotations

import logging

import kombu.exceptions
from celery import group
from celery.contrib.django.task import DjangoTask
from django.db import OperationalError, close_old_connections

from analysis import services
from config.celery import app

log = logging.getLogger(__name__)

TRANSIENT_ERRORS: tuple[type[BaseException], ...] = (
    OperationalError,
    kombu.exceptions.OperationalError,
    ConnectionError,
)


class RunTask(DjangoTask):
    """Base of the tasks whose first argument is an ``AnalysisRun`` id."""

    acks_late = True
    reject_on_worker_lost = True
    autoretry_for = TRANSIENT_ERRORS
    max_retries = 3
    retry_backoff = 2
    retry_backoff_max = 30
    retry_jitter = False
    soft_time_limit = 20 * 60
    time_limit = 25 * 60

    def before_start(self, task_id, args, kwargs) -> None:
        if not self.request.is_eager:
            # A worker thread may hold a connection the database dropped (a killed session);
            # Django discards such connections here rather than failing the retry too.
            close_old_connections()
        services.run_started(run_id=args[0], task_id=task_id)

    def on_success(self, retval, task_id, args, kwargs) -> None:
        services.run_finish(run_id=args[0])

    def on_failure(self, exc, task_id, args, kwargs, einfo) -> None:
        log.error("run %s task %s failed: %r", args[0], task_id, exc)
        services.run_fail(run_id=args[0], error=f"{type(exc).__name__}: {exc}")


@app.task(base=RunTask, bind=True, name="analysis.recompute_run")
def recompute_run(self, run_id: int) -> int:
    """Run a recompute: in this task when it fits one chunk, else as a group of chunk tasks.
    Returns the number of chunks."""
    from analysis.models import AnalysisRun

    chunks = services.run_plan(run_id=run_id)
    if chunks is None:
        return 0
    force = AnalysisRun.objects.filter(pk=run_id).values_list("force", flat=True).get()
    if len(chunks) == 1:
        services.chunk_recompute(
            run_id=run_id,
            index=0,
            site_ids=chunks[0],
            force=force,
            heartbeat=not self.request.is_eager,
        )
    elif chunks:
        group(
            recompute_chunk.si(run_id, i, ids, force) for i, ids in enumerate(chunks)
        ).apply_async()
    return len(chunks)


@app.task(base=RunTask, bind=True, name="analysis.recompute_chunk")
def recompute_chunk(self, run_id: int, index: int, site_ids: list[int], force: bool) -> dict:
    """One chunk of a run: read, compute, write its sites."""
    out = services.chunk_recompute(
        run_id=run_id,
        index=index,
        site_ids=site_ids,
        force=force,
        heartbeat=not self.request.is_eager,
    )
    return {"written": len(out.written), "skipped": len(out.skipped), "failed": len(out.failed)}


@app.task(
    bind=True,
    name="analysis.sweep_requests",
    acks_late=True,
    autoretry_for=TRANSIENT_ERRORS,
    max_retries=3,
    retry_backoff=2,
    soft_time_limit=50,
    time_limit=60,
)
def sweep_requests(self) -> int:
    """Periodic (every ``LOOPKEEP_SWEEP_EVERY_S``): send the outbox rows whose send was lost,
    and again the chunks whose heartbeat stopped and the runs lost (``analysis.services``)."""
    return services.requests_sweep() + services.runs_sweep()


@app.task(
    bind=True,
    name="analysis.recompute_fleet",
    acks_late=True,
    autoretry_for=TRANSIENT_ERRORS,
    max_retries=3,
    retry_backoff=2,
    soft_time_limit=50,
    time_limit=60,
)
def recompute_fleet(self) -> int:
    """Nightly: recompute every site (also picks up engine changes). Returns the run id."""
    return services.fleet_recompute(force=True).pk


@app.task(
    name="analysis.prune_results", acks_late=True, soft_time_limit=20 * 60, time_limit=25 * 60
)
def prune_results() -> dict[str, int]:
    """Daily: old runs, chunks and outbox rows, and the results of deleted sites
    (``analysis.retention``)."""
    from django.conf import settings

    from analysis.retention import results_prune

    return results_prune(keep_days=settings.LOOPKEEP_PRUNE_KEEP_DAYS)
