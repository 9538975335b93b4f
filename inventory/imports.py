"""Import jobs: a large spreadsheet or site file imported in the background.

``import_job_create`` stores the file and sends the job to the ``imports`` queue when the
transaction commits (in-process with no broker, the embedded default); ``import_job_run`` is
the task's body: it claims the job, runs the same import as the command line, reports progress
through a connection of its own (the import's transaction keeps its writes invisible until the
end) and checks the cancel flag between chunks of sites; a cancelled job rolls back. The job's
end (done, with its result) commits in the import's transaction, so a job still ``running`` has
written nothing.

A worker killed mid-import leaves its job ``running`` (a redelivered message finds it claimed
and does nothing). While a job runs, a thread of its worker stamps ``heartbeat_at`` every
``LOOPKEEP_CHUNK_HEARTBEAT_S`` on its own connection (as a recompute chunk's heartbeat,
``analysis.services.runs``); ``import_jobs_sweep`` (beat task ``inventory.sweep_import_jobs``)
marks failed a running job silent for ``LOOPKEEP_IMPORT_STALL_S``. ``import_jobs_prune`` (beat
task ``inventory.prune_import_jobs``, daily) deletes finished jobs older than
``LOOPKEEP_IMPORT_KEEP_DAYS``.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import logging
from collections.abc import Callable, Iterator
from typing import Any

from django.conf import settings
from django.db import DEFAULT_DB_ALIAS, connection, connections, transaction
from django.db.models import Q
from django.utils import timezone

from config.beating import beating
from inventory.models import ImportJob
from inventory.sheets import (
    ImportCancelled,
    SheetFileError,
    SheetImportError,
    guess_kind,
    import_table,
    read_table,
)
from inventory.sitefile.importer import SiteImportError

SITE_FILE_SUFFIXES = (".json", ".yaml", ".yml")
FINISHED = (ImportJob.Status.DONE, ImportJob.Status.FAILED, ImportJob.Status.CANCELLED)

log = logging.getLogger(__name__)


class ImportFailed(ValueError):
    """An import refused its input; ``errors`` are dicts (row, column, value, message)."""

    def __init__(self, summary: str, errors: list[dict[str, Any]]) -> None:
        self.errors = errors
        super().__init__(summary)


def is_site_file(filename: str) -> bool:
    return filename.lower().endswith(SITE_FILE_SUFFIXES)


def run_import(
    *,
    data: bytes,
    filename: str,
    kind: str | None = None,
    sheet: str | None = None,
    mapping: dict[str, str | None] | None = None,
    dry_run: bool = False,
    user: Any = None,
    progress: Callable[[int, int], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
) -> dict[str, Any]:
    """Import one file (a sheet, or a site file by its name) and return what it did as JSON;
    raises ``ImportFailed`` with every error, ``ImportCancelled`` when asked to stop."""
    from inventory.services import site_import
    from inventory.sitefile.validate import SiteFileParseError, load_site_text

    if kind == "site" or (kind is None and is_site_file(filename)):
        try:
            doc = load_site_text(data.decode("utf-8", errors="replace"), name=filename)
            done = site_import(doc=doc, dry_run=dry_run, user=user)
        except SiteFileParseError as exc:
            raise ImportFailed(str(exc), [_error(None, "", None, str(exc))]) from exc
        except SiteImportError as exc:
            errors = [e.split(": ", 1) if ": " in e else ("", e) for e in exc.errors]
            raise ImportFailed(
                f"{len(errors)} error(s) in the site file; nothing was written",
                [_error(None, pointer, None, message) for pointer, message in errors],
            ) from exc
        return {
            "kind": "site",
            "site": done.site,
            "dry_run": done.dry_run,
            "created": dict(done.created),
            "updated": dict(done.updated),
            "deleted": dict(done.deleted),
            "tap_changes": list(done.tap_changes),
            "summary": done.summary(),
        }
    try:
        table = read_table(data, name=filename, sheet=sheet or None)
    except SheetFileError as exc:
        raise ImportFailed(str(exc), [_error(None, "", None, str(exc))]) from exc
    kind = kind or guess_kind(table.headers, mapping)
    try:
        result = import_table(
            table,
            kind=kind,
            mapping=mapping,
            dry_run=dry_run,
            user=user,
            progress=progress,
            cancelled=cancelled,
        )
    except SheetImportError as exc:
        raise ImportFailed(
            f"{len(exc.errors)} error(s) in the sheet; nothing was written",
            [e.as_dict() for e in exc.errors],
        ) from exc
    return result.as_dict()


def _error(row: int | None, column: str, value: Any, message: str) -> dict[str, Any]:
    return {"row": row, "column": column, "value": value, "message": message}


@transaction.atomic
def import_job_create(
    *,
    data: bytes,
    filename: str,
    kind: str | None = None,
    sheet: str = "",
    mapping: dict[str, str | None] | None = None,
    dry_run: bool = False,
    user: Any = None,
) -> ImportJob:
    """Store a file to import in the background; the job is sent when this commits."""
    from inventory.tasks import run_import_job

    if kind is None:
        kind = "site" if is_site_file(filename) else ""
    job = ImportJob.objects.create(
        kind=kind,
        filename=filename[:200],
        sheet=sheet,
        data=data,
        mapping=mapping,
        dry_run=dry_run,
        created_by=user if getattr(user, "is_authenticated", False) else None,
    )
    job_id = job.pk

    def send_import() -> None:
        run_import_job.delay(job_id)

    transaction.on_commit(send_import)
    return job


@transaction.atomic
def import_job_cancel(*, job: ImportJob) -> ImportJob:
    """Ask a job to stop: a queued job is cancelled at once, a running one at its next check
    (it rolls back, writing nothing); a finished job stays as it is."""
    job = ImportJob.objects.select_for_update().get(pk=job.pk)
    if job.status == ImportJob.Status.QUEUED:
        job.status = ImportJob.Status.CANCELLED
        job.finished_at = timezone.now()
        job.data = b""
    if job.status in (
        ImportJob.Status.QUEUED,
        ImportJob.Status.RUNNING,
        ImportJob.Status.CANCELLED,
    ):
        job.cancel_requested = True
    job.save()
    return job


def _progress_writer(job_id: int) -> tuple[Callable[[int, int], None], Callable[[], None]]:
    """Write the percent done through a connection of its own (committed at once, so a poller
    sees it while the import's transaction is still open). SQLite allows one writer at a time:
    there (the embedded default, where the import runs inside the request) nothing is written."""
    if connection.vendor == "sqlite":
        return (lambda done, total: None), (lambda: None)
    own = connections.create_connection(DEFAULT_DB_ALIAS)
    table = connection.ops.quote_name(ImportJob._meta.db_table)

    def write(done: int, total: int) -> None:
        percent = min(99, done * 100 // total) if total else 99
        with own.cursor() as cursor:
            cursor.execute(f"UPDATE {table} SET percent = %s WHERE id = %s", [percent, job_id])

    return write, own.close


def _beats() -> bool:
    """Whether a running job stamps a heartbeat: not on SQLite, which allows one writer at a
    time (there the import runs inside the request, the embedded default)."""
    return connection.vendor != "sqlite"


def import_heartbeat_every_s() -> float:
    """Seconds between two heartbeats of a running job (the workers' one period)."""
    return float(getattr(settings, "LOOPKEEP_CHUNK_HEARTBEAT_S", 5.0))


@contextlib.contextmanager
def _job_heartbeat(job_id: int) -> Iterator[None]:
    """While the block runs, a thread of this process stamps the job's ``heartbeat_at``
    (``config.beating``: its own connection, beating through the import's open transaction).
    It stops with the process: a killed worker stops beating and the sweep marks the job
    failed."""
    if not _beats():
        yield
        return

    def stamp() -> None:
        ImportJob.objects.filter(pk=job_id, status=ImportJob.Status.RUNNING).update(
            heartbeat_at=timezone.now()
        )

    with beating(stamp, every_s=import_heartbeat_every_s(), label=f"import job {job_id}"):
        yield


def import_job_run(*, job_id: int) -> None:
    """Run a queued job (safe to call twice: only the call that claims it runs it)."""
    now = timezone.now()
    claimed = ImportJob.objects.filter(pk=job_id, status=ImportJob.Status.QUEUED).update(
        status=ImportJob.Status.RUNNING, started_at=now, heartbeat_at=now if _beats() else None
    )
    if not claimed:
        return
    job = ImportJob.objects.get(pk=job_id)
    progress, close = _progress_writer(job_id)

    def cancelled() -> bool:
        return ImportJob.objects.filter(pk=job_id, cancel_requested=True).exists()

    fields: dict[str, Any] = {"data": b"", "finished_at": timezone.now()}
    try:
        with _job_heartbeat(job_id), transaction.atomic():
            result = run_import(
                data=bytes(job.data),
                filename=job.filename,
                kind=job.kind or None,
                sheet=job.sheet or None,
                mapping=job.mapping,
                dry_run=job.dry_run,
                user=job.created_by,
                progress=progress,
                cancelled=cancelled,
            )
            # The end commits with the import's writes: a job left running wrote nothing.
            ImportJob.objects.filter(pk=job_id).update(
                data=b"",
                status=ImportJob.Status.DONE,
                percent=100,
                result=result,
                kind=result.get("kind", job.kind),
                message=result.get("summary", ""),
                finished_at=timezone.now(),
            )
    except ImportCancelled:
        fields.update(status=ImportJob.Status.CANCELLED, message="cancelled; nothing was written")
    except ImportFailed as exc:
        fields.update(status=ImportJob.Status.FAILED, message=str(exc), errors=exc.errors)
    except Exception as exc:
        fields.update(
            status=ImportJob.Status.FAILED,
            message=f"the import stopped on an unexpected error; nothing was written: {exc!r}",
        )
        ImportJob.objects.filter(pk=job_id).update(**{**fields, "finished_at": timezone.now()})
        close()
        raise
    else:
        return
    finally:
        close()
    fields["finished_at"] = timezone.now()
    ImportJob.objects.filter(pk=job_id).update(**fields)


def import_stall_s() -> float:
    """Seconds without a heartbeat after which a running job is taken for dead."""
    return float(getattr(settings, "LOOPKEEP_IMPORT_STALL_S", 60.0))


def _no_heartbeat_limit_s() -> float:
    """A running job with no heartbeat at all (started where none is stamped, SQLite) is dead
    once the task's hard time limit has passed: Celery has killed it by then."""
    return float(getattr(settings, "CELERY_TASK_TIME_LIMIT", 30 * 60)) + import_stall_s()


def import_lost_s() -> float:
    """Seconds a job may stay queued, since it was last sent, before its message counts as lost
    and it is sent again (``LOOPKEEP_IMPORT_LOST_S``, that of ``LOOPKEEP_RUN_LOST_S`` unless
    set). A long queue looks the same as a lost message: sending again is harmless, since only
    the delivery that claims the job runs it (``import_job_run``)."""
    return float(getattr(settings, "LOOPKEEP_IMPORT_LOST_S", 600.0))


def import_jobs_resend(*, lost_s: float | None = None, now: dt.datetime | None = None) -> int:
    """Send again each job still queued ``lost_s`` after it was last sent (its message was lost:
    the broker restarted without it, or the process died between the commit and the send).
    ``heartbeat_at`` of a queued job is when it was last sent again: one conditional UPDATE
    stamps it, so two sweeps at once send a job once, and a job claimed meanwhile is left
    alone. The messages go when the stamp commits. Returns how many jobs were sent."""
    from inventory.tasks import run_import_job

    now = now or timezone.now()
    bound = import_lost_s() if lost_s is None else lost_s
    before = now - dt.timedelta(seconds=bound)
    lost = Q(status=ImportJob.Status.QUEUED, cancel_requested=False) & (
        Q(heartbeat_at__lte=before) | Q(heartbeat_at__isnull=True, created_at__lte=before)
    )
    with transaction.atomic():
        ids = list(
            ImportJob.objects.select_for_update(skip_locked=True)
            .filter(lost)
            .values_list("pk", flat=True)
        )
        if not ids:
            return 0
        ImportJob.objects.filter(pk__in=ids).update(heartbeat_at=now)

        def send_again() -> None:
            for job_id in ids:
                run_import_job.delay(job_id)

        transaction.on_commit(send_again)
    log.warning("import jobs %s: queued for over %g s, sent again", ids, bound)
    return len(ids)


def import_jobs_sweep(*, stall_s: float | None = None, now: dt.datetime | None = None) -> int:
    """Mark failed each running job whose worker stopped: no heartbeat for ``stall_s``
    (``LOOPKEEP_IMPORT_STALL_S``), or none at all past the task's hard time limit. One
    conditional UPDATE: a job that beats or ends meanwhile is left alone. Its import had not
    committed (a job's end commits with its writes), so nothing was written. Returns how many
    jobs were marked. (Queued jobs whose message was lost: ``import_jobs_resend``.)"""
    now = now or timezone.now()
    bound = import_stall_s() if stall_s is None else stall_s
    silent = now - dt.timedelta(seconds=bound)
    never = now - dt.timedelta(seconds=max(bound, _no_heartbeat_limit_s()))
    stalled = Q(status=ImportJob.Status.RUNNING) & (
        Q(heartbeat_at__lte=silent) | Q(heartbeat_at__isnull=True, started_at__lte=never)
    )
    ids = list(ImportJob.objects.filter(stalled).values_list("pk", flat=True))
    if not ids:
        return 0
    marked = ImportJob.objects.filter(stalled, pk__in=ids).update(
        status=ImportJob.Status.FAILED,
        data=b"",
        finished_at=now,
        message=(
            f"the import stopped: its worker gave no sign of life for over {bound:g} s (it "
            "was stopped or killed); the import did not commit, so nothing was written; send "
            "the file again"
        ),
    )
    log.warning("import jobs %s: no heartbeat for %g s, marked failed", ids, bound)
    return marked


def import_jobs_prune(*, keep_days: int, now: dt.datetime | None = None) -> int:
    """Delete finished jobs (done, failed, cancelled) that ended more than ``keep_days`` ago;
    queued and running jobs stay whatever their age (the sweep still acts on them). Returns
    how many were deleted."""
    if keep_days < 1:
        raise ValueError("keep_days must be at least 1 (today's jobs are never pruned)")
    cutoff = (now or timezone.now()) - dt.timedelta(days=keep_days)
    return ImportJob.objects.filter(status__in=FINISHED, finished_at__lt=cutoff).delete()[0]
