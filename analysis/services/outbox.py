"""The analysis side of the record's outbox (``inventory.SiteChange``): a site's record changed,
so a site run is recorded and its task sent when the edit commits; changes whose send was lost
are sent again by the periodic sweep.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import logging
import threading
from collections.abc import Iterable, Iterator

import kombu.exceptions
from django.conf import settings
from django.db import transaction
from django.utils import timezone

from analysis import models
from analysis.models import RunKind, RunStatus
from inventory.changes import changes_due, changes_give_up, changes_sent
from inventory.models import SiteChange

log = logging.getLogger(__name__)

_local = threading.local()

# What a send raises when the broker cannot be reached (kombu wraps the transport's errors).
BROKER_ERRORS: tuple[type[BaseException], ...] = (
    kombu.exceptions.OperationalError,
    ConnectionError,
    TimeoutError,
)


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
    if getattr(_local, "deferred", False):
        # Handed to the bulk load's own run: not due for the sweep's quick first send.
        changes_sent(ids=[change.pk])
    else:
        run_id, change_id = run.pk, change.pk

        def send_recompute() -> None:  # named: Django logs a robust callback's __qualname__
            send_run(run_id, change_ids=[change_id])

        # ``robust``: the edit has committed by then; nothing here may turn it into an error.
        transaction.on_commit(send_recompute, robust=True)
    return run


def send_run(run_id: int, *, change_ids: Iterable[int] = ()) -> bool:
    """Send a run's task now and mark its outbox rows sent. When the broker cannot be reached
    this logs one warning line (no traceback: the edit that asked for it has succeeded) and
    returns False; the rows stay pending, never sent, and the outbox sweep sends them within
    seconds of the broker's return."""
    from analysis.tasks import recompute_run

    try:
        recompute_run.delay(run_id)
    except BROKER_ERRORS as exc:
        log.warning(
            "recompute run %s not sent, the broker is unreachable (%s); it will be sent when "
            "the broker is back",
            run_id,
            str(exc).splitlines()[0] if str(exc) else type(exc).__name__,
        )
        return False
    if change_ids:
        changes_sent(ids=change_ids)
    return True


def requests_sweep(
    *, min_age_s: float | None = None, resend_after_s: float | None = None, max_sends: int = 5
) -> int:
    """Send the runs of outbox rows (``inventory.SiteChange``) never sent after ``min_age_s``
    (``LOOPKEEP_OUTBOX_SEND_AFTER_S``, seconds: the send on commit failed, the broker was
    away), and send again those sent but still not done after ``resend_after_s``
    (``LOOPKEEP_RUN_LOST_S``: the message was lost or the task gave up; a run that is only
    waiting in a busy queue must not be sent twice). One run per site, however many changes it
    has: the pending run of its newest change, or a fresh one when that run started already. A
    send counts only when the broker took it, so an outage only delays; a change still not
    done after ``max_sends`` delivered sends is marked failed (its run rows say why). Returns
    the number of sites sent."""
    now = timezone.now()
    if min_age_s is None:
        min_age_s = float(getattr(settings, "LOOPKEEP_OUTBOX_SEND_AFTER_S", 5.0))
    if resend_after_s is None:
        resend_after_s = max(min_age_s, float(getattr(settings, "LOOPKEEP_RUN_LOST_S", 600.0)))
    cutoff = now - dt.timedelta(seconds=min_age_s)
    resend_cutoff = now - dt.timedelta(seconds=resend_after_s)
    changes_give_up(max_sends=max_sends)
    plan: dict[int, tuple[int, list[int]]] = {}
    with transaction.atomic():
        by_site: dict[int, list[SiteChange]] = {}
        due = changes_due(cutoff=cutoff, resend_cutoff=resend_cutoff)
        for change in due.select_for_update(skip_locked=True):
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
    for run_id, change_ids in plan.values():
        if not send_run(run_id, change_ids=change_ids):
            break  # the broker is still away: the rows stay due for the next sweep
        sent += 1
    return sent
