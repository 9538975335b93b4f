"""Stall detection and the outbox sweep, step by step and in-process (the clock moved by
editing the stamps): a chunk whose heartbeat stopped is sent again once; a chunk still beating,
or a run merely queued, is not; a chunk already written does nothing when it comes again; an
edit whose send failed is sent by the next sweep; a broker that cannot be reached is one
warning line.

The heartbeat thread itself needs a second database connection: PostgreSQL only.
"""

from __future__ import annotations

import datetime as dt
import logging
import socket
import time

import pytest
from django.db import connections
from django.utils import timezone

from analysis import models, selectors, services
from analysis.models import RunKind, RunStatus
from analysis.services import chunk_begin, chunk_heartbeat
from config.celery import app
from inventory import models as inv
from inventory.choices import ChangeStatus
from inventory.services import site_import
from tests.analysis.helpers import LogRecords
from tests.inventory.docs import small_site

pytestmark = [pytest.mark.django_db, pytest.mark.usefixtures("eager")]


def _ago(seconds: float) -> dt.datetime:
    return timezone.now() - dt.timedelta(seconds=seconds)


def _site_run(code: str = "TST") -> tuple[inv.Site, models.AnalysisRun]:
    with services.recompute_deferred():
        site_import(doc=small_site(code))
    site = inv.Site.objects.get(code=code)
    run = services.run_create(kind=RunKind.SITES, site_ids=[site.pk], force=True)
    services.run_started(run_id=run.pk, task_id="killed-worker")
    services.run_plan(run_id=run.pk)
    return site, run


def test_chunk_whose_heartbeat_stopped_is_sent_again_once(settings):
    site, run = _site_run()
    # The worker started chunk 0 and was killed: its row beats no more.
    assert chunk_begin(run_id=run.pk, index=0, sites=1)
    models.RunChunk.objects.filter(run=run).update(
        heartbeat_at=_ago(settings.LOOPKEEP_CHUNK_STALL_S - 5)
    )
    assert services.runs_sweep() == 0  # still within the stall window
    models.RunChunk.objects.filter(run=run).update(
        heartbeat_at=_ago(settings.LOOPKEEP_CHUNK_STALL_S + 1)
    )
    assert services.runs_sweep() == 1  # sent again (and run here, in-process)
    run.refresh_from_db()
    chunk = run.chunks.get()
    assert (run.status, run.sites_done, chunk.attempts) == (RunStatus.SUCCESS, 1, 2)
    assert chunk.done_at is not None and chunk.sent_at is not None
    assert selectors.site_status(site="TST")["stale"] is False
    assert services.runs_sweep() == 0  # done: nothing more to send
    assert models.SiteComputation.objects.filter(site_id=site.pk).count() == 1


def test_a_chunk_written_already_does_nothing_when_it_comes_again():
    site, run = _site_run()
    first = services.chunk_recompute(run_id=run.pk, index=0, site_ids=[site.pk], force=True)
    stamp = models.SiteComputation.objects.get(site_id=site.pk).computed_at
    again = services.chunk_recompute(run_id=run.pk, index=0, site_ids=[site.pk], force=True)
    assert first.counted and again.done_before and not again.written
    assert models.SiteComputation.objects.get(site_id=site.pk).computed_at == stamp


def test_a_run_whose_planner_died_is_sent_again(settings):
    with services.recompute_deferred():
        site_import(doc=small_site())
    run = services.run_create(kind=RunKind.SITES, site_ids=[inv.Site.objects.get().pk])
    services.run_started(run_id=run.pk, task_id="planner")  # running, never planned
    assert services.runs_sweep() == 0
    models.AnalysisRun.objects.filter(pk=run.pk).update(
        progress_at=_ago(settings.LOOPKEEP_CHUNK_STALL_S + 1)
    )
    assert services.runs_sweep() == 1
    run.refresh_from_db()
    assert run.status == RunStatus.SUCCESS


def test_queued_chunks_of_a_live_run_are_not_sent_twice(settings):
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 1
    with services.recompute_deferred():
        for code in ("AAA", "BBB"):
            site_import(doc=small_site(code))
    run = services.run_create(kind=RunKind.FLEET, force=True)
    services.run_started(run_id=run.pk, task_id="fleet")
    chunks = services.run_plan(run_id=run.pk)
    assert chunk_begin(run_id=run.pk, index=0, sites=1)  # chunk 0 running; chunk 1 queued
    models.AnalysisRun.objects.filter(pk=run.pk).update(progress_at=_ago(3600))
    assert services.runs_sweep() == 0  # chunk 0 beats: the run is alive, chunk 1 just waits
    models.RunChunk.objects.filter(run=run).update(heartbeat_at=_ago(3600))
    assert services.runs_sweep() == 1  # chunk 0 stalled: sent again (and run, in-process)
    run.refresh_from_db()
    assert (run.status, run.sites_done) == (RunStatus.RUNNING, 1)  # chunk 1 still waits
    assert services.runs_sweep() == 0
    # Nothing heard of the run for LOOPKEEP_RUN_LOST_S: chunk 1's message counts as lost.
    lost = _ago(settings.LOOPKEEP_RUN_LOST_S + 1)
    models.AnalysisRun.objects.filter(pk=run.pk).update(progress_at=lost)
    models.RunChunk.objects.filter(run=run).update(heartbeat_at=lost, done_at=lost, sent_at=lost)
    assert services.runs_sweep() == 1
    run.refresh_from_db()
    assert (run.status, run.sites_done, len(chunks)) == (RunStatus.SUCCESS, 2, 2)


def test_edit_whose_send_failed_is_sent_by_the_next_sweep(
    django_capture_on_commit_callbacks, settings
):
    with django_capture_on_commit_callbacks(execute=False):  # the send on commit was lost
        site_import(doc=small_site())
    change = inv.SiteChange.objects.get()
    assert (change.status, change.sent_at) == (ChangeStatus.PENDING, None)
    assert services.requests_sweep() == 0  # younger than LOOPKEEP_OUTBOX_SEND_AFTER_S
    inv.SiteChange.objects.update(created_at=_ago(settings.LOOPKEEP_OUTBOX_SEND_AFTER_S + 1))
    assert services.requests_sweep() == 1
    change.refresh_from_db()
    assert change.status == ChangeStatus.DONE
    assert selectors.site_status(site="TST")["stale"] is False


def test_a_sent_change_waiting_in_the_queue_is_not_sent_again(settings):
    with services.recompute_deferred():  # handed to a bulk load's run, as if sent
        site_import(doc=small_site())
    inv.SiteChange.objects.update(created_at=_ago(120), sent_at=_ago(120))
    assert services.requests_sweep() == 0
    inv.SiteChange.objects.update(sent_at=_ago(settings.LOOPKEEP_RUN_LOST_S + 1))
    assert services.requests_sweep() == 1


def _closed_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_send_while_the_broker_is_unreachable_is_one_warning_line():
    caught = LogRecords()
    logger = logging.getLogger("analysis")
    logger.addHandler(caught)
    app.conf.task_always_eager = False
    url = app.conf.broker_write_url
    app.conf.broker_write_url = f"redis://127.0.0.1:{_closed_port()}/0"
    app._pool = None
    app.amqp._producer_pool = None
    try:
        with services.recompute_deferred():
            site_import(doc=small_site())
        change = inv.SiteChange.objects.get()
        run = services.run_create(kind=RunKind.SITE, site_ids=[change.site_id])
        assert services.send_run(run.pk, change_ids=[change.pk]) is False
    finally:
        logger.removeHandler(caught)
        app.conf.broker_write_url = url
        app._pool = None
        app.amqp._producer_pool = None
    ours = [r for r in caught.records if r.levelno >= logging.INFO]
    assert len(ours) == 1 and ours[0].exc_info is None
    assert "not sent, the broker is unreachable" in ours[0].getMessage()
    assert "\n" not in ours[0].getMessage()
    assert inv.SiteChange.objects.get().sends == 1  # only the bulk load's hand-over


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_heartbeat_beats_while_the_chunk_runs(settings):
    settings.LOOPKEEP_CHUNK_HEARTBEAT_S = 0.2
    _site, run = _site_run()
    assert chunk_begin(run_id=run.pk, index=0, sites=1)
    start = models.RunChunk.objects.get(run=run).heartbeat_at
    with chunk_heartbeat(run_id=run.pk, index=0):
        time.sleep(1.0)  # a long computation, in this thread
        beat = models.RunChunk.objects.get(run=run).heartbeat_at
    assert beat > start
    time.sleep(0.5)
    assert models.RunChunk.objects.get(run=run).heartbeat_at == beat  # stopped with the block
    connections.close_all()
