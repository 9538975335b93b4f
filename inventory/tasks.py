"""Background work of the inventory: import jobs (routed to the ``imports`` queue by the
deployment's task routes; in-process with no broker). The task takes the job's id and is safe to
run twice (``import_job_run`` claims the job first)."""

from __future__ import annotations

from celery import shared_task

from inventory.imports import import_job_run


@shared_task(name="inventory.run_import_job", acks_late=True, ignore_result=True)
def run_import_job(job_id: int) -> None:
    import_job_run(job_id=job_id)
