"""Retention: ``results_prune`` removes what only grows. Finished runs (and their chunk rows)
and done or given-up recompute requests (outbox rows) older than the kept days, and the result
rows of sites that no longer exist (results hold a plain ``site_id``, no foreign key, so
deleting a site leaves them behind). Pending and running runs and pending requests are kept
whatever their age: the sweeps still need them.
"""

from __future__ import annotations

import datetime as dt

from django.db import transaction
from django.utils import timezone

from analysis import models
from analysis.models import RunStatus
from analysis.services import RESULT_MODELS
from inventory.choices import ChangeStatus
from inventory.models import Site, SiteChange


def results_prune(*, keep_days: int, now: dt.datetime | None = None) -> dict[str, int]:
    """Delete the rows described above, in one transaction; returns rows deleted per table."""
    if keep_days < 1:
        raise ValueError("keep_days must be at least 1 (today's runs are never pruned)")
    cutoff = (now or timezone.now()) - dt.timedelta(days=keep_days)
    out: dict[str, int] = {}
    with transaction.atomic():
        old_runs = models.AnalysisRun.objects.filter(
            status__in=(RunStatus.SUCCESS, RunStatus.FAILURE), finished_at__lt=cutoff
        )
        out["RunChunk"] = models.RunChunk.objects.filter(run__in=old_runs).delete()[0]
        out["AnalysisRun"] = old_runs.delete()[0]
        # A run keeps its request (SET NULL otherwise): only requests no kept run points at.
        kept = models.AnalysisRun.objects.filter(change_id__isnull=False).values("change_id")
        out["SiteChange"] = (
            SiteChange.objects.filter(
                status__in=(ChangeStatus.DONE, ChangeStatus.FAILED), created_at__lt=cutoff
            )
            .exclude(pk__in=kept)
            .delete()[0]
        )
        sites = Site.objects.values("pk")
        for model in RESULT_MODELS:
            # One DELETE each (no signals, no relations: Django's fast delete).
            out[model.__name__] = model._default_manager.exclude(site_id__in=sites).delete()[0]
    return out
