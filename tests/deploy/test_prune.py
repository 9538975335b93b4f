"""``prune_results`` (analysis/retention.py): what goes and what stays. Retention rules are this
project's own (deploy/README.md); keeping unfinished runs and pending requests whatever their age
is common practice, no source (the sweeps still act on them)."""

from __future__ import annotations

import datetime as dt
import io

import pytest
from django.core.management import CommandError, call_command
from django.utils import timezone

from analysis import models, services
from analysis.models import RunKind, RunStatus
from inventory import models as inv
from inventory.choices import ChangeStatus
from inventory.services import site_import
from tests.inventory.docs import small_site

OLD = timezone.now() - dt.timedelta(days=45)


def _run(status: str, finished: dt.datetime | None, change=None) -> models.AnalysisRun:
    run = models.AnalysisRun.objects.create(kind=RunKind.SITES, status=status, change=change)
    models.AnalysisRun.objects.filter(pk=run.pk).update(finished_at=finished, created_at=OLD)
    return run


def _results(site_id: int) -> int:
    return sum(m.objects.filter(site_id=site_id).count() for m in services.RESULT_MODELS)


@pytest.mark.django_db
def test_prune_removes_old_finished_runs_done_requests_and_orphan_results():
    with services.recompute_deferred():
        site_import(doc=small_site("KEP"))
        site_import(doc=small_site("DEL"))
    kept_site, del_site = (inv.Site.objects.get(code=c).pk for c in ("KEP", "DEL"))
    models.AnalysisRun.objects.all().delete()  # the imports' site runs: the test makes its own
    services.chunk_recompute(run_id=None, index=0, site_ids=[kept_site, del_site], force=True)
    assert _results(del_site) > 0
    # The site is deleted: results hold a plain site id (no foreign key), so its rows stay
    # behind, pointing at an id no site has.
    gone_site = del_site + 1000
    for model in services.RESULT_MODELS:
        model.objects.filter(site_code="DEL").update(site_id=gone_site)

    old_ok = _run(RunStatus.SUCCESS, OLD)
    models.RunChunk.objects.create(run=old_ok, index=0, sites=1)
    old_failed = _run(RunStatus.FAILURE, OLD)
    still_running = _run(RunStatus.RUNNING, None)
    recent = _run(RunStatus.SUCCESS, timezone.now())
    inv.SiteChange.objects.update(status=ChangeStatus.DONE, created_at=OLD)
    change_of_kept_run = inv.SiteChange.objects.get(site_id=kept_site)
    models.AnalysisRun.objects.filter(pk=recent.pk).update(change=change_of_kept_run)
    pending = inv.SiteChange.objects.create(site_id=kept_site, revision=99)
    inv.SiteChange.objects.filter(pk=pending.pk).update(created_at=OLD)
    old_done = inv.SiteChange.objects.create(site_id=kept_site, revision=98, status="done")
    inv.SiteChange.objects.filter(pk=old_done.pk).update(created_at=OLD)
    kept_results = _results(kept_site)

    out = io.StringIO()
    call_command("prune_results", "--keep-days", "30", stdout=out)

    remaining = set(models.AnalysisRun.objects.values_list("pk", flat=True))
    assert old_ok.pk not in remaining and old_failed.pk not in remaining
    assert {still_running.pk, recent.pk} <= remaining
    assert not models.RunChunk.objects.exists()
    assert set(inv.SiteChange.objects.values_list("pk", flat=True)) == {
        change_of_kept_run.pk,
        pending.pk,
    }
    assert _results(gone_site) == 0
    assert _results(kept_site) == kept_results
    assert "AnalysisRun 2" in out.getvalue() and "SiteChange 2" in out.getvalue()

    call_command("prune_results", "--keep-days", "30", stdout=(again := io.StringIO()))
    assert again.getvalue().startswith("pruned 0 rows")  # idempotent


@pytest.mark.django_db
def test_prune_refuses_to_keep_less_than_a_day():
    with pytest.raises(CommandError, match="keep_days must be at least 1"):
        call_command("prune_results", "--keep-days", "0")


def test_prune_runs_daily_on_the_default_queue(settings):
    from analysis import tasks
    from config.celery import app

    entry = settings.CELERY_BEAT_SCHEDULE["prune-results-daily"]
    assert entry["task"] == "analysis.prune_results"
    assert tasks.prune_results.name in app.tasks
    assert app.amqp.router.route({}, "analysis.prune_results")["queue"].name == "default"
