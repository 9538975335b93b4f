"""Writes of the analysis app: the recompute outbox, run rows and the bulk replacement of a
site's results.

The flow: an edit records a change in the inventory's outbox (``inventory.changes``, a
``SiteChange`` row) inside its own transaction; the inventory hands the row to its registered
consumers, and ``site_change_consume`` (registered by ``AnalysisConfig.ready()``) adds a site run
row and sends the task when the edit commits. The task reads the site record, runs the engine
and calls ``results_replace``, which in one transaction locks the site rows, refuses to replace
newer results with older ones, swaps the site's result rows (COPY on PostgreSQL, ``bulk_create``
elsewhere), marks the outbox rows done and counts the run's progress. If the send is lost
(broker down), ``requests_sweep`` sends it again.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
import logging
import operator
import threading
import time
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

from django.conf import settings
from django.db import connection, transaction
from django.db import models as djm
from django.db.models import Case, F, Q, Value, When
from django.db.models.functions import Concat
from django.utils import timezone

from analysis import models
from analysis.models import RunKind, RunStatus
from analysis.selectors import chunk_inputs
from inventory.changes import changes_done, changes_due, changes_give_up, changes_sent
from inventory.models import Site, SiteChange
from record import SiteRecord

log = logging.getLogger(__name__)

# Replaced as one block per site, in this order (members before circuits only for tidiness:
# there are no foreign keys between result tables).
RESULT_MODELS: tuple[type[djm.Model], ...] = (
    models.CTRating,
    models.CTReport,
    models.Finding,
    models.ProcedureVerdict,
    models.CircuitMember,
    models.Circuit,
    models.SiteComputation,
)

_local = threading.local()


def chunk_sites() -> int:
    """Sites per fleet chunk (one Celery task each)."""
    return int(getattr(settings, "LOOPKEEP_RECOMPUTE_CHUNK_SITES", 10))


@contextlib.contextmanager
def recompute_deferred() -> Iterator[None]:
    """Record outbox rows without sending them, for bulk loads that end with one fleet run
    (which marks them done) instead of one job per site."""
    previous = getattr(_local, "deferred", False)
    _local.deferred = True
    try:
        yield
    finally:
        _local.deferred = previous


def site_change_consume(change: SiteChange) -> models.AnalysisRun:
    """The consumer of the inventory's outbox: a site's record changed, so its results must be
    recomputed. Called in the edit's transaction (``inventory.changes.change_record``): a site
    run row, and its task sent when that transaction commits (never before, or a worker could
    read the old record). Inside ``recompute_deferred`` nothing is sent."""
    run = models.AnalysisRun.objects.create(
        kind=RunKind.SITE, site_ids=[change.site_id], sites_total=1, change=change
    )
    if not getattr(_local, "deferred", False):
        from analysis.tasks import recompute_run

        recompute_run.delay_on_commit(run.pk)
    return run


def run_create(
    *, kind: str, site_ids: Iterable[int] | None = None, force: bool = False
) -> models.AnalysisRun:
    """A run row for the given sites (None: the whole fleet when the run starts)."""
    ids = None if site_ids is None else sorted(set(site_ids))
    return models.AnalysisRun.objects.create(
        kind=kind, site_ids=ids, force=force, sites_total=0 if ids is None else len(ids)
    )


def run_dispatch(*, run: models.AnalysisRun, on_commit: bool = True) -> None:
    """Send the run's task when the surrounding transaction commits (at once outside one).
    ``on_commit=False`` sends at once: for top-level callers (the CLI) whose run row is
    already committed."""
    from analysis.tasks import recompute_run

    if on_commit:
        recompute_run.delay_on_commit(run.pk)
    else:
        recompute_run.delay(run.pk)


def run_started(*, run_id: int, task_id: str) -> None:
    """A task of the run started (first start or a retry)."""
    now = timezone.now()
    models.AnalysisRun.objects.filter(pk=run_id).exclude(status=RunStatus.SUCCESS).update(
        status=RunStatus.RUNNING, started_at=djm.functions.Coalesce(F("started_at"), Value(now))
    )
    models.AnalysisRun.objects.filter(pk=run_id).update(
        attempts=F("attempts") + 1, task_id=task_id[:64], progress_at=now
    )


def run_finish(*, run_id: int) -> None:
    """Close the run once every site is accounted for: success, or failure when a site could
    not be computed. Safe to call from every chunk (only the last one changes the row)."""
    models.AnalysisRun.objects.filter(
        pk=run_id, status=RunStatus.RUNNING, sites_done__gte=F("sites_total")
    ).update(
        status=Case(
            When(sites_failed=0, then=Value(RunStatus.SUCCESS)), default=Value(RunStatus.FAILURE)
        ),
        finished_at=timezone.now(),
    )


def run_fail(*, run_id: int, error: str) -> None:
    """The run's task gave up (a permanent error, or transient ones past the retry bound)."""
    models.AnalysisRun.objects.filter(pk=run_id).update(
        status=RunStatus.FAILURE,
        finished_at=timezone.now(),
        error=Concat(F("error"), Value(error[:4000] + "\n")),
    )


def run_plan(*, run_id: int) -> list[list[int]] | None:
    """Freeze the run's sites (the fleet as it stands now, for a fleet run) and split them in
    chunks. None when the run is gone or already succeeded (a redelivered message)."""
    with transaction.atomic():
        run = models.AnalysisRun.objects.select_for_update().filter(pk=run_id).first()
        if run is None or run.status == RunStatus.SUCCESS:
            return None
        if run.site_ids is None:
            run.site_ids = list(Site.objects.order_by("pk").values_list("pk", flat=True))
            run.sites_total = len(run.site_ids)
        if not run.chunk_size:
            # Fixed once, so a redelivered or re-sent run splits its sites the same way.
            run.chunk_size = chunk_sites()
        run.save(update_fields=["site_ids", "sites_total", "chunk_size"])
    return _chunks(run.site_ids, run.chunk_size)


def _chunks(site_ids: list[int], size: int) -> list[list[int]]:
    return [site_ids[i : i + size] for i in range(0, len(site_ids), size)]


@dataclass
class ChunkOutcome:
    """What one chunk did, and the time of each phase."""

    written: list[int] = field(default_factory=list)
    skipped: list[int] = field(default_factory=list)
    failed: dict[int, str] = field(default_factory=dict)
    counts: dict[str, int] = field(default_factory=dict)
    read_s: float = 0.0
    compute_s: float = 0.0
    write_s: float = 0.0
    counted: bool = False


def _compute(records: Mapping[int, SiteRecord]) -> tuple[dict[int, Any], dict[int, str]]:
    """The engine on a chunk, site by site, so one site the engine cannot handle costs only
    itself: its old results stay (and show as stale), the others are written."""
    from analysis.compute import compute_sites

    results: dict[int, Any] = {}
    failed: dict[int, str] = {}
    for sid, record in records.items():
        try:
            results.update(compute_sites({sid: record}))
        except Exception:
            log.exception("recompute of site %s failed", sid)
            failed[sid] = _error_text(record)
    return results, failed


def _error_text(record: SiteRecord) -> str:
    import sys

    exc = sys.exc_info()[1]
    return f"site {record.site.code}: {type(exc).__name__}: {exc}"


def chunk_recompute(
    *, run_id: int | None, index: int, site_ids: list[int], force: bool = False
) -> ChunkOutcome:
    """Read, compute and write one chunk of sites. Without ``force`` a site whose results are
    already at its current revision is skipped. Idempotent: running it again leaves the same
    rows and counts the chunk's sites once."""
    out = ChunkOutcome()
    t0 = time.perf_counter()
    heads, records = chunk_inputs(site_ids, skip_current=not force)
    out.skipped = sorted(set(heads) - set(records))
    out.read_s = time.perf_counter() - t0
    t1 = time.perf_counter()
    results, out.failed = _compute(records) if records else ({}, {})
    out.compute_s = time.perf_counter() - t1
    t2 = time.perf_counter()
    with transaction.atomic():
        written, newer = results_replace(heads=heads, results=results, run_id=run_id)
        out.written = written
        out.skipped += newer
        out.counts = _counts(results, written)
        gone = len(set(site_ids) - set(heads))  # deleted since the run was planned
        out.write_s = time.perf_counter() - t2
        if run_id is not None:
            out.counted = _count_chunk(run_id, index, len(site_ids), out, gone)
    return out


def _counts(results: Mapping[int, Any], written: Iterable[int]) -> dict[str, int]:
    c = dict.fromkeys(
        ("cts", "findings", "dangers", "verdicts", "unsafe_procedures", "circuits"), 0
    )
    for sid in written:
        r = results[sid]
        c["cts"] += len(r.ct_reports)
        c["findings"] += len(r.findings)
        c["dangers"] += sum(1 for f in r.findings if f["severity"] == "danger")
        c["verdicts"] += len(r.verdicts)
        c["unsafe_procedures"] += sum(1 for v in r.verdicts if not v["safe"])
        c["circuits"] += len(r.circuits)
    return c


def _count_chunk(run_id: int, index: int, n_sites: int, out: ChunkOutcome, gone: int) -> bool:
    # The site rows are locked by results_replace, so a concurrent redelivery of this chunk
    # waits here and then sees the chunk row.
    if models.RunChunk.objects.filter(run_id=run_id, index=index).exists():
        return False
    models.RunChunk.objects.create(run_id=run_id, index=index, sites=n_sites)
    update: dict[str, Any] = {
        "sites_done": F("sites_done") + n_sites,
        "sites_skipped": F("sites_skipped") + len(out.skipped) + gone,
        "sites_failed": F("sites_failed") + len(out.failed),
        "read_s": F("read_s") + out.read_s,
        "compute_s": F("compute_s") + out.compute_s,
        "write_s": F("write_s") + out.write_s,
        "progress_at": timezone.now(),
    }
    update.update({k: F(k) + v for k, v in out.counts.items()})
    if out.failed:
        text = "\n".join(out.failed.values()) + "\n"
        update["error"] = Concat(F("error"), Value(text[:4000]))
    models.AnalysisRun.objects.filter(pk=run_id).update(**update)
    return True


def results_replace(
    *, heads: Mapping[int, tuple[str, int]], results: Mapping[int, Any], run_id: int | None
) -> tuple[list[int], list[int]]:
    """Replace the stored results of the given sites, in the caller's transaction.

    ``heads`` gives each site's (code, revision) as read *before* its record; ``results`` the
    engine's ``SiteResults`` per site. The site rows are locked (``select_for_update``; a
    no-op on SQLite, whose writers are serialised anyway) so two writers of one site take
    turns, and a site whose stored results are already newer is left alone. Outbox rows the
    stored results satisfy are marked done. Returns (written site ids, skipped as newer).
    """
    ids = sorted(heads)
    if not ids:
        return [], []
    list(Site.objects.select_for_update().filter(pk__in=ids).order_by("pk").values_list("pk"))
    stored = dict(
        models.SiteComputation.objects.filter(site_id__in=ids).values_list("site_id", "revision")
    )
    written = [s for s in ids if s in results and stored.get(s, 0) <= heads[s][1]]
    newer = [s for s in ids if s in results and stored.get(s, 0) > heads[s][1]]
    if written:
        for model in RESULT_MODELS:
            model._default_manager.filter(site_id__in=written).delete()
        now = timezone.now()
        rows = _result_rows({s: results[s] for s in written}, heads, now, run_id)
        for model in RESULT_MODELS:
            _insert(model, rows[model])
    # Every pending change of these sites at or below the revision now stored is satisfied.
    at = {**stored, **{s: heads[s][1] for s in written}}
    changes_done(at={s: at[s] for s in ids if s in at})
    return written, newer


def _result_rows(
    results: Mapping[int, Any],
    heads: Mapping[int, tuple[str, int]],
    now: dt.datetime,
    run_id: int | None,
) -> dict[type[djm.Model], list[dict[str, Any]]]:
    rows: dict[type[djm.Model], list[dict[str, Any]]] = {m: [] for m in RESULT_MODELS}
    for sid, r in results.items():
        code, revision = heads[sid]
        common = {
            "site_id": sid,
            "site_code": code,
            "revision": revision,
            "computed_at": now,
            "run_id": run_id,
        }
        rows[models.CTRating] += [{**common, **case} for case in r.ct_cases]
        rows[models.CTReport] += [
            {**common, "ct": rep["ct"], "report": rep["report"]} for rep in r.ct_reports
        ]
        rows[models.Finding] += [
            {
                **common,
                **{
                    k: f.get(k)
                    for k in ("ct", "device", "input", "circuit", "procedure", "step", "stage")
                },
                "code": f["code"],
                "severity": f["severity"],
                "message": f["message"],
                "numbers": f.get("numbers") or {},
            }
            for f in r.findings
        ]
        rows[models.ProcedureVerdict] += [
            {
                **common,
                "procedure": v["procedure"],
                "safe": bool(v["safe"]),
                "first_danger": v.get("first_danger"),
                "verdict": v["verdict"],
            }
            for v in r.verdicts
        ]
        for c in r.circuits:
            rows[models.Circuit].append(
                {**common, "key": c["key"], "ground_points": int(c["ground_points"])}
            )
            members = {("ct", code) for code in c["cts"]} | {
                ("device", code) for code in c["devices"]
            }
            rows[models.CircuitMember] += [
                {**common, "circuit_key": c["key"], "kind": kind, "code": member}
                for kind, member in sorted(members)
            ]
        dangers = sum(1 for f in r.findings if f["severity"] == "danger")
        rows[models.SiteComputation].append(
            {
                **common,
                "cts": len(r.ct_reports),
                "findings": len(r.findings),
                "dangers": dangers,
                "verdicts": len(r.verdicts),
                "unsafe_procedures": sum(1 for v in r.verdicts if not v["safe"]),
                "circuits": len(r.circuits),
            }
        )
    return rows


def _columns(model: type[djm.Model]) -> list[djm.Field]:
    return [f for f in model._meta.concrete_fields if not f.primary_key]


def _insert(model: type[djm.Model], rows: list[dict[str, Any]], *, table: str = "") -> None:
    """Insert rows: one COPY on PostgreSQL (psycopg 3), ``bulk_create`` elsewhere. ``table``
    overrides the model's table (PostgreSQL only; the benchmark copies into a twin)."""
    if not rows:
        return
    fields = _columns(model)
    if connection.vendor == "postgresql":
        names = ", ".join(connection.ops.quote_name(f.column) for f in fields)
        table = connection.ops.quote_name(table or model._meta.db_table)
        # COPY goes to psycopg directly: wrap its errors as Django's, so a lost connection is
        # a django.db.OperationalError (retried) and the connection is known to be broken.
        attnames = [f.attname for f in fields]
        json_at = [i for i, f in enumerate(fields) if isinstance(f, djm.JSONField)]
        pick = operator.itemgetter(*attnames)
        dumps = json.dumps
        with (
            connection.wrap_database_errors,
            connection.cursor() as cursor,
            cursor.copy(f"COPY {table} ({names}) FROM STDIN") as copy,
        ):
            write = copy.write_row
            for row in rows:
                values = list(pick(row))
                for i in json_at:
                    values[i] = dumps(values[i])
                write(values)
    else:
        model._default_manager.bulk_create([model(**row) for row in rows], batch_size=500)


def requests_sweep(*, min_age_s: float = 60.0, max_sends: int = 5) -> int:
    """Send again the runs of outbox rows (``inventory.SiteChange``) not done after
    ``min_age_s`` (their send was lost, or the task failed). One run per site, however many
    changes it has: the pending run sent for its newest change, or a fresh one when that run
    started already. A send counts only when the broker took it, so an outage only delays; a
    change still not done after ``max_sends`` delivered sends is marked failed (its run rows say
    why). Returns the number of sites sent."""
    from analysis.tasks import recompute_run

    cutoff = timezone.now() - dt.timedelta(seconds=min_age_s)
    changes_give_up(max_sends=max_sends)
    plan: dict[int, tuple[int, list[int]]] = {}
    with transaction.atomic():
        by_site: dict[int, list[SiteChange]] = {}
        for change in changes_due(cutoff=cutoff).select_for_update(skip_locked=True):
            by_site.setdefault(change.site_id, []).append(change)
        newest = {site_id: changes[0].pk for site_id, changes in by_site.items()}
        pending_runs = dict(
            models.AnalysisRun.objects.filter(
                change_id__in=newest.values(), status=RunStatus.PENDING
            )
            .order_by("change_id", "id")
            .values_list("change_id", "pk")
        )
        for site_id, changes in by_site.items():
            run_id = pending_runs.get(newest[site_id])
            if run_id is None:
                # A run that started already keeps its own history; send a fresh one.
                run_id = models.AnalysisRun.objects.create(
                    kind=RunKind.SITE, site_ids=[site_id], sites_total=1, change_id=newest[site_id]
                ).pk
            plan[site_id] = (run_id, [c.pk for c in changes])
    sent = 0
    for site_id, (run_id, change_ids) in plan.items():
        try:
            recompute_run.delay(run_id)
        except Exception as exc:  # the broker is still away: leave the rows due
            log.warning("sweep could not send run %s (site %s): %s", run_id, site_id, exc)
            break
        changes_sent(ids=change_ids)
        sent += 1
    return sent


def runs_sweep(*, stalled_s: float = 600.0) -> int:
    """Send again the parts of runs that made no progress for ``stalled_s``: a run never
    started (its message lost) is sent again whole; a running one gets its chunks that have no
    ``RunChunk`` row. A chunk that was only slow runs twice, which is harmless (idempotent,
    counted once). Returns the number of messages sent."""
    from analysis.tasks import recompute_chunk, recompute_run

    cutoff = timezone.now() - dt.timedelta(seconds=stalled_s)
    sent = 0
    stalled = models.AnalysisRun.objects.filter(
        Q(status=RunStatus.PENDING, created_at__lte=cutoff, progress_at__isnull=True)
        | Q(status__in=(RunStatus.PENDING, RunStatus.RUNNING), progress_at__lte=cutoff)
    )
    for run in stalled:
        models.AnalysisRun.objects.filter(pk=run.pk).update(progress_at=timezone.now())
        if not run.chunk_size:
            recompute_run.delay(run.pk)
            sent += 1
            continue
        done = set(models.RunChunk.objects.filter(run=run).values_list("index", flat=True))
        missing = [
            (index, ids)
            for index, ids in enumerate(_chunks(run.site_ids or [], run.chunk_size))
            if index not in done
        ]
        if not missing:  # every chunk written, only the closing was lost
            run_finish(run_id=run.pk)
        for index, ids in missing:
            recompute_chunk.delay(run.pk, index, ids, run.force)
            sent += 1
    return sent


def fleet_recompute(*, force: bool = True, on_commit: bool = True) -> models.AnalysisRun:
    """A whole-fleet run (the nightly sweep, and ``recompute`` without a site)."""
    run = run_create(kind=RunKind.FLEET, force=force)
    run_dispatch(run=run, on_commit=on_commit)
    return run
