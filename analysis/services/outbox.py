"""The analysis side of the record's outbox (``inventory.SiteChange``): a site's record changed,
so a site run is recorded and its task sent when the edit commits; changes whose send was lost
are sent again by the periodic sweep.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import logging
import threading
from collections.abc import Iterator

from django.db import transaction
from django.utils import timezone

from analysis import models
from analysis.models import RunKind, RunStatus
from inventory.changes import changes_due, changes_give_up, changes_sent
from inventory.models import SiteChange

log = logging.getLogger(__name__)

_local = threading.local()


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
