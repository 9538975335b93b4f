"""Background work of the inventory: import jobs (routed to the ``imports`` queue by the
deployment's task routes; in-process with no broker), the sweep that marks failed the jobs whose
worker died and sends again the jobs whose message was lost, and the daily prune of old jobs.
The tasks take ids (or nothing) and are safe to run twice (``import_job_run`` claims the job
first; the sweep and the prune are conditional)."""

from __future__ import annotations

from celery import shared_task
from django.conf import settings

from inventory.imports import (
    import_job_run,
    import_jobs_prune,
    import_jobs_resend,
    import_jobs_sweep,
)


@shared_task(name="inventory.run_import_job", acks_late=True, ignore_result=True)
def run_import_job(job_id: int) -> None:
    import_job_run(job_id=job_id)


@shared_task(name="inventory.sweep_import_jobs", acks_late=True, soft_time_limit=50, time_limit=60)
def sweep_import_jobs() -> int:
    """Periodic (every ``LOOPKEEP_IMPORT_SWEEP_EVERY_S``): mark failed the running jobs whose
    worker stopped beating (``inventory.imports.import_jobs_sweep``) and send again the queued
    jobs whose message was lost (``import_jobs_resend``). Returns how many were marked failed."""
    marked = import_jobs_sweep()
    import_jobs_resend()
    return marked


@shared_task(
    name="inventory.prune_import_jobs", acks_late=True, soft_time_limit=20 * 60, time_limit=25 * 60
)
def prune_import_jobs() -> int:
    """Daily: finished import jobs older than ``LOOPKEEP_IMPORT_KEEP_DAYS``."""
    return import_jobs_prune(keep_days=settings.LOOPKEEP_IMPORT_KEEP_DAYS)
