"""Import jobs whose worker died, whose message was lost, and old jobs (inventory.imports): the
sweep marks failed a running job silent past its bound and leaves a live one alone; a job still
queued past its bound is sent again, once per bound, and runs once however many messages
arrive; a job's end commits with its import, so a job left running wrote nothing; the prune
deletes finished jobs past the kept days and keeps queued and running ones. The clock is moved
by editing the stamps.

Bounds and retention are this project's own (deploy/README.md, "Housekeeping"); marking a job
whose worker stopped as failed, rather than leaving it running, and sending again a message taken
for lost to a task that claims its work first (at-least-once delivery), are common practice, no
source.
The heartbeat thread needs a second database connection: PostgreSQL only.
"""

from __future__ import annotations

import datetime as dt
import json
import time

import pytest
from django.db import connections
from django.utils import timezone

from config.celery import app
from inventory import imports
from inventory.imports import (
    import_job_create,
    import_job_run,
    import_jobs_prune,
    import_jobs_resend,
    import_jobs_sweep,
)
from inventory.models import ImportJob, Site
from tests.inventory.docs import small_site

RUNNING, FAILED, DONE = ImportJob.Status.RUNNING, ImportJob.Status.FAILED, ImportJob.Status.DONE


def _ago(seconds: float) -> dt.datetime:
    return timezone.now() - dt.timedelta(seconds=seconds)


def _job(status: str = RUNNING, **stamps: dt.datetime | None) -> ImportJob:
    job = ImportJob.objects.create(kind="site", filename="x.json", data=b"{}", status=status)
    ImportJob.objects.filter(pk=job.pk).update(**stamps)
    return job


def _site_job(django_capture_on_commit_callbacks, code: str = "JOB") -> ImportJob:
    with django_capture_on_commit_callbacks(execute=False):  # the worker below runs it
        return import_job_create(data=json.dumps(small_site(code)).encode(), filename="j.json")


@pytest.mark.django_db
def test_a_running_job_silent_past_the_bound_is_marked_failed_once(settings):
    settings.LOOPKEEP_IMPORT_STALL_S = 60
    dead = _job(started_at=_ago(300), heartbeat_at=_ago(61))
    beating = _job(started_at=_ago(300), heartbeat_at=_ago(5))
    # Started where no heartbeat is stamped (SQLite): dead only past the task's hard limit.
    young = _job(started_at=_ago(settings.CELERY_TASK_TIME_LIMIT - 10), heartbeat_at=None)
    old = _job(started_at=_ago(settings.CELERY_TASK_TIME_LIMIT + 61), heartbeat_at=None)
    queued = _job(ImportJob.Status.QUEUED)
    done = _job(DONE, started_at=_ago(300), heartbeat_at=_ago(300))

    assert import_jobs_sweep() == 2
    status = dict(ImportJob.objects.values_list("pk", "status"))
    assert {pk for pk, s in status.items() if s == FAILED} == {dead.pk, old.pk}
    assert status[beating.pk] == status[young.pk] == RUNNING
    assert (status[queued.pk], status[done.pk]) == ("queued", DONE)
    dead.refresh_from_db()
    assert dead.message == (
        "the import stopped: its worker gave no sign of life for over 60 s (it was stopped "
        "or killed); the import did not commit, so nothing was written; send the file again"
    )
    assert dead.finished_at is not None and bytes(dead.data) == b""
    assert import_jobs_sweep() == 0  # idempotent


@pytest.mark.django_db
def test_a_job_whose_worker_died_after_the_import_wrote_nothing(
    monkeypatch, django_capture_on_commit_callbacks
):
    job = _site_job(django_capture_on_commit_callbacks)
    real = imports.run_import

    def killed_after_the_import(**kwargs):
        real(**kwargs)
        raise SystemExit("worker killed")  # not an Exception: no handler marks the job

    monkeypatch.setattr(imports, "run_import", killed_after_the_import)
    with pytest.raises(SystemExit):
        import_job_run(job_id=job.pk)
    job.refresh_from_db()
    assert job.status == RUNNING
    assert not Site.objects.filter(code="JOB").exists()  # the import's writes rolled back

    ImportJob.objects.filter(pk=job.pk).update(heartbeat_at=_ago(3600), started_at=_ago(3600))
    assert import_jobs_sweep(stall_s=60) == 1
    monkeypatch.setattr(imports, "run_import", real)
    import_job_run(job_id=job.pk)  # the redelivered message finds the job ended
    job.refresh_from_db()
    assert job.status == FAILED and "nothing was written" in job.message
    assert not Site.objects.filter(code="JOB").exists()


@pytest.mark.django_db
def test_a_finished_job_ends_with_its_import(django_capture_on_commit_callbacks):
    job = _site_job(django_capture_on_commit_callbacks)
    import_job_run(job_id=job.pk)
    job.refresh_from_db()
    assert (job.status, job.percent, bytes(job.data)) == (DONE, 100, b"")
    assert job.result["created"]["sites"] == 1 and Site.objects.filter(code="JOB").exists()
    assert job.finished_at is not None


@pytest.mark.django_db
def test_a_job_queued_past_the_bound_is_sent_again_once_and_runs_once(
    settings, monkeypatch, django_capture_on_commit_callbacks
):
    settings.LOOPKEEP_IMPORT_LOST_S = 600
    lost = _site_job(django_capture_on_commit_callbacks, code="LOST")  # its message never went
    fresh = _job(ImportJob.Status.QUEUED)
    resent_lately = _job(ImportJob.Status.QUEUED, heartbeat_at=_ago(60))
    cancelled = _job(ImportJob.Status.QUEUED, cancel_requested=True)
    running = _job(RUNNING, started_at=_ago(900), heartbeat_at=_ago(5))
    ImportJob.objects.filter(pk__in=[lost.pk, fresh.pk, resent_lately.pk, cancelled.pk]).update(
        created_at=_ago(900)
    )
    ImportJob.objects.filter(pk=fresh.pk).update(created_at=_ago(30))
    sent: list[int] = []
    monkeypatch.setattr("inventory.tasks.run_import_job.delay", sent.append)

    with django_capture_on_commit_callbacks(execute=True):
        assert import_jobs_resend() == 1
    assert sent == [lost.pk]
    lost.refresh_from_db()
    assert lost.status == ImportJob.Status.QUEUED and lost.heartbeat_at > _ago(5)
    with django_capture_on_commit_callbacks(execute=True):
        assert import_jobs_resend() == 0  # stamped: not again before the bound
    assert sent == [lost.pk]
    assert ImportJob.objects.get(pk=running.pk).status == RUNNING

    # The resent message and the original one (arriving late) both reach a worker: one import.
    import_job_run(job_id=lost.pk)
    import_job_run(job_id=lost.pk)
    lost.refresh_from_db()
    assert lost.status == DONE and Site.objects.filter(code="LOST").count() == 1
    with django_capture_on_commit_callbacks(execute=True):
        assert import_jobs_resend(now=timezone.now() + dt.timedelta(hours=1)) == 2
    assert sorted(sent[1:]) == sorted([fresh.pk, resent_lately.pk])  # never the done one


@pytest.mark.django_db
def test_prune_deletes_finished_jobs_older_than_the_kept_days():
    old = timezone.now() - dt.timedelta(days=31)
    gone = [_job(s, finished_at=old) for s in (DONE, FAILED, ImportJob.Status.CANCELLED)]
    recent = _job(DONE, finished_at=timezone.now() - dt.timedelta(days=29))
    running = _job(RUNNING, started_at=old)
    queued = _job(ImportJob.Status.QUEUED)
    ImportJob.objects.filter(pk__in=[running.pk, queued.pk]).update(created_at=old)

    assert import_jobs_prune(keep_days=30) == 3
    left = set(ImportJob.objects.values_list("pk", flat=True))
    assert left == {recent.pk, running.pk, queued.pk}
    assert not left & {j.pk for j in gone}
    assert import_jobs_prune(keep_days=30) == 0
    with pytest.raises(ValueError, match="keep_days must be at least 1"):
        import_jobs_prune(keep_days=0)


def test_beat_runs_the_sweep_and_the_prune(settings):
    from inventory import tasks

    sweep = settings.CELERY_BEAT_SCHEDULE["sweep-import-jobs"]
    assert sweep["task"] == tasks.sweep_import_jobs.name == "inventory.sweep_import_jobs"
    assert sweep["schedule"] == settings.LOOPKEEP_IMPORT_SWEEP_EVERY_S
    prune = settings.CELERY_BEAT_SCHEDULE["prune-import-jobs-daily"]
    assert prune["task"] == tasks.prune_import_jobs.name == "inventory.prune_import_jobs"
    assert {tasks.sweep_import_jobs.name, tasks.prune_import_jobs.name} <= set(app.tasks)


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_heartbeat_beats_while_the_job_runs(settings, monkeypatch, eager):
    settings.LOOPKEEP_CHUNK_HEARTBEAT_S = 0.2
    with monkeypatch.context() as patch:
        patch.setattr(imports.transaction, "on_commit", lambda f, using=None: None)
        job = import_job_create(data=json.dumps(small_site("HBT")).encode(), filename="h.json")
    seen: list[dt.datetime | None] = []
    real = imports.run_import

    def slow_import(**kwargs):
        seen.append(ImportJob.objects.get(pk=job.pk).heartbeat_at)
        time.sleep(1.0)  # a long validation, in this thread
        seen.append(ImportJob.objects.get(pk=job.pk).heartbeat_at)
        return real(**kwargs)

    monkeypatch.setattr(imports, "run_import", slow_import)
    import_job_run(job_id=job.pk)
    assert seen[0] is not None and seen[1] > seen[0]
    job.refresh_from_db()
    assert job.status == DONE
    time.sleep(0.5)
    assert ImportJob.objects.get(pk=job.pk).heartbeat_at == job.heartbeat_at  # stopped
    connections.close_all()
