"""Import jobs: a large spreadsheet or site file imported in the background.

``import_job_create`` stores the file and sends the job to the ``imports`` queue when the
transaction commits (in-process with no broker, the embedded default); ``import_job_run`` is
the task's body: it claims the job, runs the same import as the command line, reports progress
through a connection of its own (the import's transaction keeps its writes invisible until the
end) and checks the cancel flag between chunks of sites; a cancelled job rolls back.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from django.db import DEFAULT_DB_ALIAS, connection, connections, transaction
from django.utils import timezone

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


def import_job_run(*, job_id: int) -> None:
    """Run a queued job (safe to call twice: only the call that claims it runs it)."""
    claimed = ImportJob.objects.filter(pk=job_id, status=ImportJob.Status.QUEUED).update(
        status=ImportJob.Status.RUNNING, started_at=timezone.now()
    )
    if not claimed:
        return
    job = ImportJob.objects.get(pk=job_id)
    progress, close = _progress_writer(job_id)

    def cancelled() -> bool:
        return ImportJob.objects.filter(pk=job_id, cancel_requested=True).exists()

    fields: dict[str, Any] = {"data": b"", "finished_at": timezone.now()}
    try:
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
        fields.update(
            status=ImportJob.Status.DONE,
            percent=100,
            result=result,
            kind=result.get("kind", job.kind),
            message=result.get("summary", ""),
        )
    finally:
        close()
    fields["finished_at"] = timezone.now()
    ImportJob.objects.filter(pk=job_id).update(**fields)
