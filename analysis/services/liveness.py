"""The stall sweep: what a lost worker or a lost message left undone is sent again.

- A chunk that started and whose heartbeat (``RunChunk.heartbeat_at``, stamped every few
  seconds by its worker) is older than ``LOOPKEEP_CHUNK_STALL_S``: its worker was killed or cut
  off. Sent again at once (the original message may also come back from the broker after its
  visibility timeout; the chunk is then found done and does nothing).
- A run whose planning task died (running, not planned, silent for ``LOOPKEEP_CHUNK_STALL_S``).
- A run or chunk never started after ``LOOPKEEP_RUN_LOST_S`` with no sign of life in the run (a
  message the broker lost; this wait is long because a message waiting in a busy queue looks
  the same).

Writes are idempotent and a chunk is counted once, so a chunk that was only slow and is sent
twice leaves one set of results.
"""

from __future__ import annotations

import datetime as dt
import logging

from django.conf import settings
from django.db.models import Q
from django.utils import timezone

from analysis import models
from analysis.models import RunStatus
from analysis.services.runs import ACTIVE, run_chunks, run_finish

log = logging.getLogger(__name__)


def chunk_stall_s() -> float:
    return float(getattr(settings, "LOOPKEEP_CHUNK_STALL_S", 45.0))


def run_lost_s() -> float:
    return float(getattr(settings, "LOOPKEEP_RUN_LOST_S", 600.0))


def runs_sweep(
    *, stall_s: float | None = None, lost_s: float | None = None, stalled_s: float | None = None
) -> int:
    """Send again what stalled (see the module). Returns the number of messages sent; stops at
    the first send the broker refuses (the next sweep tries again). ``stalled_s`` sets both
    waits at once (for callers that watch a run themselves)."""
    if stalled_s is not None:
        stall_s = lost_s = stalled_s
    now = timezone.now()
    stall = now - dt.timedelta(seconds=chunk_stall_s() if stall_s is None else stall_s)
    lost = now - dt.timedelta(seconds=run_lost_s() if lost_s is None else lost_s)
    try:
        sent = _stalled_chunks(stall, now)
        sent += _lost_runs(stall, lost, now)
    except _BrokerAway as away:
        log.warning("stall sweep: the broker is away (%s); trying again next sweep", away.cause)
        sent = away.sent
    return sent


class _BrokerAway(Exception):
    def __init__(self, cause: Exception, sent: int) -> None:
        super().__init__(str(cause))
        self.cause, self.sent = cause, sent


def _stalled_chunks(stall: dt.datetime, now: dt.datetime) -> int:
    from analysis.tasks import recompute_chunk

    sent = 0
    stalled = models.RunChunk.objects.filter(
        done_at__isnull=True, heartbeat_at__lte=stall, run__status__in=ACTIVE
    ).select_related("run")
    for chunk in stalled:
        run = chunk.run
        # Claimed by clearing the heartbeat (a conditional UPDATE): of two sweeps, one sends.
        claimed = models.RunChunk.objects.filter(
            pk=chunk.pk, done_at__isnull=True, heartbeat_at=chunk.heartbeat_at
        ).update(heartbeat_at=None, sent_at=now)
        if not claimed:
            continue
        ids = run_chunks(run)
        if chunk.index >= len(ids):
            continue
        log.warning(
            "run %s chunk %s: no heartbeat since %s, sending it again",
            run.pk,
            chunk.index,
            chunk.heartbeat_at,
        )
        try:
            recompute_chunk.delay(run.pk, chunk.index, ids[chunk.index], run.force)
        except Exception as exc:
            models.RunChunk.objects.filter(pk=chunk.pk, heartbeat_at__isnull=True).update(
                heartbeat_at=chunk.heartbeat_at, sent_at=chunk.sent_at
            )
            raise _BrokerAway(exc, sent) from exc
        sent += 1
    return sent


def _lost_runs(stall: dt.datetime, lost: dt.datetime, now: dt.datetime) -> int:
    from analysis.tasks import recompute_chunk, recompute_run

    sent = 0
    candidates = models.AnalysisRun.objects.filter(
        Q(status=RunStatus.PENDING, created_at__lte=lost, progress_at__isnull=True)
        | Q(status__in=ACTIVE, progress_at__lte=lost)
        | Q(status=RunStatus.RUNNING, chunk_size=0, progress_at__lte=stall)
    )
    for run in candidates:
        chunks = {c.index: c for c in models.RunChunk.objects.filter(run=run)}
        alive = any(
            (stamp or lost) > lost
            for c in chunks.values()
            for stamp in (c.heartbeat_at, c.done_at, c.sent_at)
        )
        if alive:
            continue
        models.AnalysisRun.objects.filter(pk=run.pk).update(progress_at=now)
        try:
            if not run.chunk_size:
                recompute_run.delay(run.pk)
                sent += 1
                continue
            missing = [
                (index, ids)
                for index, ids in enumerate(run_chunks(run))
                if index not in chunks or chunks[index].done_at is None
            ]
            if not missing:  # every chunk written, only the closing was lost
                run_finish(run_id=run.pk)
            for index, ids in missing:
                recompute_chunk.delay(run.pk, index, ids, run.force)
                sent += 1
        except Exception as exc:
            raise _BrokerAway(exc, sent) from exc
    return sent
