"""Run rows and their chunks: a run (one site after an edit, chosen sites, or the fleet) is
planned in chunks; each chunk reads its sites' records, runs the engine and hands the results
to the results writer, counting its sites once; the stall sweep sends again what was lost.
"""

from __future__ import annotations

import contextlib
import itertools
import logging
import time
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

from django.conf import settings
from django.db import models as djm
from django.db import transaction
from django.db.models import Case, Count, F, Value, When
from django.db.models.functions import Concat
from django.utils import timezone

from analysis import models
from analysis.models import RunKind, RunStatus
from analysis.selectors import chunk_inputs
from analysis.services.results import TRANSIENT_DB_ERRORS, results_replace
from config.beating import beating
from inventory.models import CurrentTransformer, Site
from record import SiteRecord
from record.gcpause import gc_frozen

log = logging.getLogger(__name__)


def chunk_sites() -> int:
    """Sites per fleet chunk (one Celery task each) at the most."""
    return int(getattr(settings, "LOOPKEEP_RECOMPUTE_CHUNK_SITES", 40))


def chunk_cts() -> int:
    """CTs per fleet chunk at the most (a site with more goes alone in its chunk)."""
    return int(getattr(settings, "LOOPKEEP_RECOMPUTE_CHUNK_CTS", 4000))


def run_create(
    *, kind: str, site_ids: Iterable[int] | None = None, force: bool = False
) -> models.AnalysisRun:
    """A run row for the given sites (None: the whole fleet when the run starts)."""
    ids = None if site_ids is None else sorted(set(site_ids))
    return models.AnalysisRun.objects.create(
        kind=kind, site_ids=ids, force=force, sites_total=0 if ids is None else len(ids)
    )


def run_dispatch(*, run: models.AnalysisRun, on_commit: bool = True) -> None:
    """Send the run's task when the surrounding transaction commits (at once outside one; a
    broker that cannot be reached then is one warning line, and the stall sweep sends the run
    later). ``on_commit=False`` sends at once and raises when the broker cannot be reached: for
    top-level callers (the CLI) whose run row is already committed."""
    from analysis.services.outbox import send_run
    from analysis.tasks import recompute_run

    run_id = run.pk

    def send_recompute() -> None:  # named: Django logs a robust callback's __qualname__
        send_run(run_id)

    if on_commit:
        transaction.on_commit(send_recompute, robust=True)
    else:
        recompute_run.delay(run_id)  # the caller reports a broker that cannot be reached


# The run's state machine, each move one conditional UPDATE (so two workers racing cannot
# undo each other): pending -> running -> success | failure, and pending | running -> failure.
# A finished run (success or failure) never runs again; a task of it that still starts (a
# redelivered message, another chunk of a failed fleet run) only counts its attempt.
ACTIVE = (RunStatus.PENDING, RunStatus.RUNNING)


def run_started(*, run_id: int, task_id: str) -> None:
    """A task of the run started (first start or a retry)."""
    now = timezone.now()
    models.AnalysisRun.objects.filter(pk=run_id, status__in=ACTIVE).update(
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
    """The run's task gave up (a permanent error, or transient ones past the retry bound). A
    run that succeeded stays so; a failed one keeps its first finish time and adds the error."""
    models.AnalysisRun.objects.filter(pk=run_id, status=RunStatus.FAILURE).update(
        error=Concat(F("error"), Value(error[:4000] + "\n"))
    )
    models.AnalysisRun.objects.filter(pk=run_id, status__in=ACTIVE).update(
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
            # Fixed once, so a redelivered or re-sent run splits its sites the same way (even
            # when CTs were added since).
            run.chunk_size = chunk_sites()
            run.chunk_starts = chunk_starts(run.site_ids, run.chunk_size, chunk_cts())
        run.save(update_fields=["site_ids", "sites_total", "chunk_size", "chunk_starts"])
    return run_chunks(run)


def chunk_starts(site_ids: list[int], max_sites: int, max_cts: int) -> list[int]:
    """Where each chunk starts in ``site_ids``: sites are taken in order while the chunk holds
    at most ``max_sites`` sites and ``max_cts`` CTs (a site with more CTs goes alone). The
    worker's memory and time follow the CTs of its chunk, and the chunks even out."""
    counts = dict(
        CurrentTransformer.objects.filter(site_id__in=site_ids)
        .values("site_id")
        .annotate(n=Count("pk"))
        .values_list("site_id", "n")
    )
    starts: list[int] = []
    sites = cts = 0
    for i, sid in enumerate(site_ids):
        n = counts.get(sid, 0)
        if not starts or sites >= max_sites or cts + n > max_cts:
            starts.append(i)
            sites = cts = 0
        sites += 1
        cts += n
    return starts


def run_chunks(run: models.AnalysisRun) -> list[list[int]]:
    """The chunks of a planned run, as planned (runs planned before chunks were sized by CTs
    have no ``chunk_starts``: every ``chunk_size`` sites)."""
    ids = run.site_ids or []
    if run.chunk_starts is None:
        return chunks_of(ids, run.chunk_size or 1)
    return chunks_at(ids, run.chunk_starts)


def fleet_chunks(site_ids: list[int]) -> list[list[int]]:
    """These sites in chunks as a run planned now would split them (the benchmarks)."""
    return chunks_at(site_ids, chunk_starts(site_ids, chunk_sites(), chunk_cts()))


def chunks_at(site_ids: list[int], starts: list[int]) -> list[list[int]]:
    return [site_ids[a:b] for a, b in itertools.pairwise([*starts, len(site_ids)])]


def chunks_of(site_ids: list[int], size: int) -> list[list[int]]:
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
    done_before: bool = False  # the chunk's results were written by an earlier delivery


def _read(
    site_ids: list[int], *, skip_current: bool
) -> tuple[dict[int, tuple[str, int]], dict[int, SiteRecord], dict[int, str]]:
    """The chunk's inputs (``chunk_inputs``), read together; when that fails for a reason other
    than the connection (a row the driver cannot read back), site by site, so a site whose
    record cannot be read costs only itself. Returns (heads, records, unreadable with why)."""
    try:
        heads, records = chunk_inputs(site_ids, skip_current=skip_current)
        return heads, records, {}
    except TRANSIENT_DB_ERRORS:
        raise
    except Exception:
        log.exception("reading the records of sites %s failed; reading them one by one", site_ids)
    heads, records, unread = {}, {}, {}
    for sid in site_ids:
        try:
            with transaction.atomic():
                one_head, one = chunk_inputs([sid], skip_current=skip_current)
        except TRANSIENT_DB_ERRORS:
            raise
        except Exception as exc:
            log.exception("reading the record of site %s failed", sid)
            row = Site.objects.filter(pk=sid).values_list("code", "revision").first()
            if row is not None:
                heads[sid] = row
                unread[sid] = f"site {row[0]}: reading: {type(exc).__name__}: {exc}"
        else:
            heads.update(one_head)
            records.update(one)
    return heads, records, unread


def _compute(records: Mapping[int, SiteRecord]) -> tuple[dict[int, Any], dict[int, str]]:
    """The engine on a chunk, site by site, so one site the engine cannot handle costs only
    itself: its old results stay (and show as stale), the others are written."""
    from analysis.compute import compute_sites

    results: dict[int, Any] = {}
    failed: dict[int, str] = {}
    with gc_frozen():  # the chunk's records stay out of the collector's passes
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
    return f"site {record.site.code}: computing: {type(exc).__name__}: {exc}"


def chunk_recompute(
    *,
    run_id: int | None,
    index: int,
    site_ids: list[int],
    force: bool = False,
    heartbeat: bool = False,
) -> ChunkOutcome:
    """Read, compute and write one chunk of sites. Without ``force`` a site whose results are
    already at its current revision is skipped. Idempotent: running it again leaves the same
    rows and counts the chunk's sites once; a chunk of a run whose results were written already
    (a redelivered or re-sent message) does nothing. With ``heartbeat`` (a real worker) the
    chunk's row gets a heartbeat every few seconds while it runs (``chunk_heartbeat``)."""
    if run_id is not None and not chunk_begin(run_id=run_id, index=index, sites=len(site_ids)):
        return ChunkOutcome(done_before=True)
    if heartbeat and run_id is not None:
        with chunk_heartbeat(run_id=run_id, index=index):
            return _chunk_work(run_id, index, site_ids, force)
    return _chunk_work(run_id, index, site_ids, force)


def chunk_begin(*, run_id: int, index: int, sites: int) -> bool:
    """The chunk starts (first start, retry or re-send): its row, with a fresh heartbeat and
    one more attempt. False when its results were written already (nothing left to do)."""
    now = timezone.now()
    row, created = models.RunChunk.objects.get_or_create(
        run_id=run_id, index=index, defaults={"sites": sites, "heartbeat_at": now, "attempts": 1}
    )
    if created:
        return True
    return bool(
        models.RunChunk.objects.filter(pk=row.pk, done_at__isnull=True).update(
            heartbeat_at=now, attempts=F("attempts") + 1
        )
    )


def heartbeat_every_s() -> float:
    """Seconds between two heartbeats of a running chunk."""
    return float(getattr(settings, "LOOPKEEP_CHUNK_HEARTBEAT_S", 5.0))


@contextlib.contextmanager
def chunk_heartbeat(*, run_id: int, index: int) -> Iterator[None]:
    """While the block runs, a thread of this process stamps the chunk's ``heartbeat_at`` every
    ``LOOPKEEP_CHUNK_HEARTBEAT_S`` (``config.beating``: on its own database connection, so it
    beats through long computations and open write transactions alike). It stops with the
    process: a worker killed with ``kill -9`` stops beating, and the stall sweep sends the
    chunk again."""

    def stamp() -> None:
        models.RunChunk.objects.filter(run_id=run_id, index=index, done_at__isnull=True).update(
            heartbeat_at=timezone.now()
        )

    with beating(stamp, every_s=heartbeat_every_s(), label=f"run {run_id} chunk {index}"):
        yield


def _chunk_work(run_id: int | None, index: int, site_ids: list[int], force: bool) -> ChunkOutcome:
    out = ChunkOutcome()
    t0 = time.perf_counter()
    heads, records, unread = _read(site_ids, skip_current=not force)
    out.skipped = sorted(set(heads) - set(records) - set(unread))
    out.read_s = time.perf_counter() - t0
    t1 = time.perf_counter()
    results, failed = _compute(records) if records else ({}, {})
    out.compute_s = time.perf_counter() - t1
    t2 = time.perf_counter()
    with transaction.atomic():
        wrote = results_replace(
            heads=heads, results=results, run_id=run_id, failed={**unread, **failed}
        )
        out.written = wrote.written
        out.failed = wrote.failed
        out.skipped += wrote.newer
        out.counts = _counts(results, wrote.written)
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
    # One conditional UPDATE marks the chunk done: a concurrent delivery of the same chunk
    # waits on the row lock until this transaction ends, then finds it done and counts nothing.
    now = timezone.now()
    if not models.RunChunk.objects.filter(run_id=run_id, index=index, done_at__isnull=True).update(
        done_at=now, heartbeat_at=now, sites=n_sites
    ):
        return False
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


def fleet_recompute(*, force: bool = True, on_commit: bool = True) -> models.AnalysisRun:
    """A whole-fleet run (the nightly sweep, and ``recompute`` without a site)."""
    run = run_create(kind=RunKind.FLEET, force=force)
    run_dispatch(run=run, on_commit=on_commit)
    return run
