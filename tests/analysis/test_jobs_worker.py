"""Background recompute on real servers: a Celery worker thread consuming from the Redis broker
(``CELERY_BROKER_URL``, db 15 in CI) and PostgreSQL, with real commits
(``django_db(transaction=True)``). The faults: the broker unreachable during an edit, a task
whose database session is killed in the middle of its write, and two recomputes of one site
racing.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import io
import socket
import threading
import time
from collections.abc import Callable, Iterator

import psycopg
import pytest
from celery.contrib.testing.worker import start_worker
from django.core.management import call_command
from django.db import connection, connections
from django.utils import timezone

from analysis import models, selectors, services
from analysis.models import RunKind, RunStatus
from analysis.services import results as results_writer
from analysis.services import runs as run_services
from config.celery import app
from inventory import models as inv
from inventory.choices import ChangeStatus
from inventory.services import ct_change_tap, site_import
from tests.analysis.helpers import one_set_of_rows, result_rows
from tests.inventory.docs import small_site

WAIT_S = 30.0


def wait_for(check: Callable[[], bool], what: str, timeout_s: float = WAIT_S) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if check():
            return
        time.sleep(0.1)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


def fresh(code: str) -> bool:
    return selectors.site_status(site=code)["stale"] is False


def closed_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _reset_producer_pool() -> None:
    app._pool = None
    app.amqp._producer_pool = None


@contextlib.contextmanager
def broker_unreachable() -> Iterator[None]:
    """Producers in this process point at a closed port; the worker keeps its own connection."""
    url = app.conf.broker_write_url  # producers connect here (it defaults to broker_url)
    app.conf.broker_write_url = f"redis://127.0.0.1:{closed_port()}/15"
    _reset_producer_pool()
    try:
        yield
    finally:
        app.conf.broker_write_url = url
        _reset_producer_pool()


@pytest.fixture
def worker():
    app.conf.task_always_eager = False
    app.control.purge()  # messages other tests may have left on the test broker
    # The queues of the analysis (config/settings/base.py routes): its runs, its chunks, and
    # the default queue of the housekeeping tasks.
    with start_worker(
        app,
        pool="solo",
        perform_ping_check=False,
        shutdown_timeout=20,
        loglevel="WARNING",
        queues=["recompute", "fleet", "default"],
    ) as w:
        yield w


@pytest.mark.broker
@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_edit_commits_then_worker_writes_fresh_results(worker):
    site_import(doc=small_site())
    wait_for(lambda: fresh("TST"), "results of the import")
    site = inv.Site.objects.get(code="TST")
    ct = inv.CurrentTransformer.objects.get(site=site, code="CB-1-A")
    ct_change_tap(ct=ct, to=("X1", "X5"), by="tester")
    assert selectors.site_status(site="TST")["stale"] is True  # committed, not yet computed
    wait_for(lambda: fresh("TST"), "results of the tap change")
    # X1-X5 of the 0/100/150/400/600 winding is 600:5 (S4).
    assert selectors.ct_report(site="TST", ct="CB-1-A")[0]["ratio"] == "600:5"
    assert not inv.SiteChange.objects.exclude(status=ChangeStatus.DONE).exists()
    assert result_rows(site.pk) == one_set_of_rows(site.pk)
    runs = models.AnalysisRun.objects.filter(kind=RunKind.SITE)
    assert runs.count() == 2 and all(r.status == RunStatus.SUCCESS for r in runs)
    assert all(r.task_id for r in runs)


@pytest.mark.broker
@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_broker_outage_delays_results_but_loses_nothing(worker):
    site_import(doc=small_site())
    wait_for(lambda: fresh("TST"), "results of the import")
    site = inv.Site.objects.get(code="TST")
    ct = inv.CurrentTransformer.objects.get(site=site, code="CB-1-C")
    with broker_unreachable():
        ct_change_tap(ct=ct, to=("X2", "X5"), by="tester")  # commits without an error
        site.refresh_from_db()
        request = inv.SiteChange.objects.get(site_id=site.pk, revision=site.revision)
        assert request.status == ChangeStatus.PENDING
        inv.SiteChange.objects.filter(pk=request.pk).update(
            created_at=timezone.now() - dt.timedelta(minutes=2)
        )
        assert services.requests_sweep() == 0  # still down: nothing sent, nothing given up
    time.sleep(1.0)
    request.refresh_from_db()
    assert request.status == ChangeStatus.PENDING and request.sends == 0
    assert selectors.site_status(site="TST")["stale"] is True
    assert services.requests_sweep() == 1  # the broker is back
    wait_for(lambda: fresh("TST"), "results after the sweep")
    request.refresh_from_db()
    assert request.status == ChangeStatus.DONE
    # X2-X5 of the 0/100/150/400/600 winding is 500:5 (S4).
    assert selectors.ct_report(site="TST", ct="CB-1-C")[0]["ratio"] == "500:5"
    assert result_rows(site.pk) == one_set_of_rows(site.pk)


@pytest.mark.broker
@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_task_killed_mid_write_is_redelivered_and_leaves_one_set(worker, monkeypatch):
    with services.recompute_deferred():
        site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    real_insert = results_writer._insert
    killed: list[int] = []

    def insert_then_lose_the_session(model, rows):
        real_insert(model, rows)
        if model is models.Finding and not killed:
            # The write is half done (ratings, reports, findings copied); the database now
            # kills this session, as when the worker's host or connection dies.
            pid = connection.connection.info.backend_pid
            killed.append(pid)
            dsn = connection.get_connection_params()
            with psycopg.connect(
                host=dsn.get("host"),
                port=dsn.get("port"),
                user=dsn.get("user"),
                password=dsn.get("password"),
                dbname="postgres",
                autocommit=True,
            ) as admin:
                admin.execute("SELECT pg_terminate_backend(%s)", [pid])

    monkeypatch.setattr(results_writer, "_insert", insert_then_lose_the_session)
    run = services.run_create(kind=RunKind.SITES, site_ids=[site.pk], force=True)
    services.run_dispatch(run=run)
    wait_for(
        lambda: models.AnalysisRun.objects.get(pk=run.pk).status == RunStatus.SUCCESS,
        "the retried run",
    )
    run.refresh_from_db()
    assert killed and run.attempts == 2
    assert run.sites_done == 1 and run.chunks.count() == 1
    assert result_rows(site.pk) == one_set_of_rows(site.pk)
    assert not inv.SiteChange.objects.exclude(status=ChangeStatus.DONE).exists()


@pytest.mark.broker
@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_fleet_run_through_the_broker_with_progress(worker, settings):
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 1
    with services.recompute_deferred():
        for code in ("AAA", "BBB", "CCC"):
            site_import(doc=small_site(code))
    out = io.StringIO()
    call_command("recompute", "--wait", "--timeout", str(WAIT_S), stdout=out)
    run = models.AnalysisRun.objects.get(kind=RunKind.FLEET)
    assert (run.status, run.sites_done, run.sites_total) == (RunStatus.SUCCESS, 3, 3)
    assert run.chunks.count() == 3
    assert "3/3 sites" in out.getvalue()
    assert selectors.stale_site_ids() == []
    assert not inv.SiteChange.objects.exclude(status=ChangeStatus.DONE).exists()


class _Paused:
    """Holds chosen threads between their compute and their write."""

    def __init__(self, monkeypatch, *, parties: int | None = None):
        self.release = threading.Event()
        self.computed = threading.Event()
        self.barrier = threading.Barrier(parties) if parties else None
        self.names: set[str] = set()
        real = run_services._compute

        def compute(docs):
            result = real(docs)
            if threading.current_thread().name in self.names:
                self.computed.set()
                if self.barrier:
                    self.barrier.wait(timeout=WAIT_S)
                else:
                    assert self.release.wait(timeout=WAIT_S)
            return result

        monkeypatch.setattr(run_services, "_compute", compute)


def _in_thread(name: str, site_id: int, errors: list) -> threading.Thread:
    def target():
        try:
            services.chunk_recompute(run_id=None, index=0, site_ids=[site_id], force=True)
        except BaseException as exc:  # reported by the test below
            errors.append(exc)
        finally:
            connections.close_all()

    return threading.Thread(target=target, name=name)


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_older_recompute_finishing_last_does_not_overwrite_newer(monkeypatch):
    with services.recompute_deferred():
        site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    old_revision = site.revision
    paused = _Paused(monkeypatch)
    paused.names = {"old"}
    errors: list = []
    old = _in_thread("old", site.pk, errors)
    old.start()
    assert paused.computed.wait(WAIT_S)  # read and computed at old_revision, not yet written
    with services.recompute_deferred():
        ct_change_tap(
            ct=inv.CurrentTransformer.objects.get(site=site, code="CB-1-A"), to=("X1", "X5")
        )
    services.chunk_recompute(run_id=None, index=0, site_ids=[site.pk], force=True)
    site.refresh_from_db()
    assert site.revision == old_revision + 1
    paused.release.set()
    old.join(WAIT_S)
    assert errors == []
    assert selectors.site_status(site="TST")["computed_revision"] == site.revision
    assert set(
        models.CTRating.objects.filter(site_id=site.pk).values_list("revision", flat=True)
    ) == {site.revision}
    assert selectors.ct_report(site="TST", ct="CB-1-A")[0]["ratio"] == "600:5"  # S4
    assert result_rows(site.pk) == one_set_of_rows(site.pk)


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_two_recomputes_of_one_site_racing_leave_one_set(monkeypatch):
    with services.recompute_deferred():
        site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    services.chunk_recompute(run_id=None, index=0, site_ids=[site.pk], force=True)
    paused = _Paused(monkeypatch, parties=2)
    paused.names = {"a", "b"}
    errors: list = []
    threads = [_in_thread(name, site.pk, errors) for name in ("a", "b")]
    for t in threads:
        t.start()
    for t in threads:
        t.join(WAIT_S)
    assert errors == []
    assert result_rows(site.pk) == one_set_of_rows(site.pk)
    assert models.SiteComputation.objects.get(site_id=site.pk).revision == site.revision
