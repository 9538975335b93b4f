"""The fault scenarios on the real servers (issue 11): PostgreSQL (the test database) and Redis
(``CELERY_BROKER_URL``), with real Celery worker processes and real commits.

- a worker killed with SIGKILL in the middle of a chunk: the chunk's heartbeat stops, the stall
  sweep sends it again, another worker computes it; the run says success and every site has
  exactly one set of results, well within two minutes;
- the broker cut during an edit (a TCP proxy in front of Redis drops every connection and
  refuses new ones; the machine's Redis keeps running): the edit commits with one warning line,
  and the results are fresh seconds after the broker is back;
- one site whose results the database refuses in a chunk computed by a worker: it alone fails;
- an import while the broker is unreachable: exit 0 and one warning line on stderr.

The periodic sweep is run by the test at the beat's interval (``LOOPKEEP_SWEEP_EVERY_S``), as
beat would send it to a worker. Recovery times are printed (``pytest -s``).
"""

from __future__ import annotations

import contextlib
import json
import logging
import os
import subprocess
import sys
import time
from collections.abc import Iterator

import pytest
from django.conf import settings

from analysis import models, selectors, services
from analysis.models import RunKind, RunStatus
from config.celery import app
from inventory import models as inv
from inventory.choices import ChangeStatus
from inventory.services import ct_change_tap, site_import
from tests.analysis.faults.servers import (
    ROOT,
    Proxy,
    Worker,
    broker_via,
    database_url,
    wait_for,
    workers,
)
from tests.analysis.helpers import LogRecords, one_set_of_rows, result_rows
from tests.inventory.docs import small_site

pytestmark = [
    pytest.mark.broker,
    pytest.mark.postgres,
    pytest.mark.django_db(transaction=True),
]

KILL_RECOVERY_BOUND_S = 120.0  # issue 11: a lost chunk re-sent "within about a minute"
BROKER_RECOVERY_BOUND_S = 30.0  # issue 11: fresh "within seconds of the broker's return"


@pytest.fixture(autouse=True)
def through_the_broker(_require_services):  # after the check that the servers are there
    before = app.conf.task_always_eager
    app.conf.task_always_eager = False
    app.control.purge()
    yield
    app.conf.task_always_eager = before


@contextlib.contextmanager
def app_broker(url: str) -> Iterator[None]:
    """This process (the web and command side) sends through ``url``."""
    before = app.conf.broker_url, app.conf.broker_write_url
    app.conf.broker_url = app.conf.broker_write_url = url
    app._pool = None
    app.amqp._producer_pool = None
    try:
        yield
    finally:
        app.conf.broker_url, app.conf.broker_write_url = before
        app._pool = None
        app.amqp._producer_pool = None


class Beat:
    """Runs the periodic sweep at the beat's interval while the test waits."""

    def __init__(self) -> None:
        self.every = settings.LOOPKEEP_SWEEP_EVERY_S
        self.next = time.monotonic() + self.every

    def tick(self) -> None:
        if time.monotonic() >= self.next:
            self.next += self.every
            services.requests_sweep()
            services.runs_sweep()


def _import_quietly(*codes: str) -> list[int]:
    with services.recompute_deferred():
        for code in codes:
            site_import(doc=small_site(code))
    return list(inv.Site.objects.filter(code__in=codes).order_by("pk").values_list("pk", flat=True))


def _status(run_id: int) -> str:
    return models.AnalysisRun.objects.values_list("status", flat=True).get(pk=run_id)


def test_worker_killed_mid_chunk_is_recovered_with_one_set_of_results(settings):
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 10
    codes = ("KA1", "KA2", "KA3", "KA4", "KA5", "KA6")
    ids = _import_quietly(*codes)
    with workers() as started:
        doomed = Worker("doomed", slow_site_s=1.0)  # the chunk takes 6 s and more there
        started.append(doomed)
        doomed.ready()
        run = services.run_create(kind=RunKind.SITES, site_ids=ids, force=True)
        services.run_dispatch(run=run, on_commit=False)
        wait_for(
            lambda: models.RunChunk.objects.filter(run=run, heartbeat_at__isnull=False).exists(),
            "the doomed worker to start the chunk",
            60,
        )
        survivor = Worker("survivor")
        started.append(survivor)
        time.sleep(2.0)  # in the middle of the chunk's computation
        assert not models.RunChunk.objects.filter(run=run, done_at__isnull=False).exists()
        doomed.kill()
        killed = time.monotonic()
        beat = Beat()

        def recovered() -> bool:
            beat.tick()
            return _status(run.pk) == RunStatus.SUCCESS

        wait_for(recovered, "the run to succeed after the kill", KILL_RECOVERY_BOUND_S + 30)
        recovery_s = time.monotonic() - killed
    print(f"\nkill -9 mid-chunk: run success {recovery_s:.1f} s after the kill")
    assert recovery_s < KILL_RECOVERY_BOUND_S
    run.refresh_from_db()
    chunk = run.chunks.get()
    assert (run.sites_done, run.sites_failed, run.chunks.count()) == (6, 0, 1)
    assert chunk.attempts == 2 and chunk.done_at is not None  # started twice, counted once
    for code, site_id in zip(codes, ids, strict=True):
        assert selectors.site_status(site=code)["stale"] is False
        assert result_rows(site_id) == one_set_of_rows(site_id)  # exactly one set of results


def test_broker_cut_during_an_edit_fresh_seconds_after_its_return():
    proxy = Proxy()
    proxy.up()
    via = broker_via(proxy.port)
    caught = LogRecords()
    with app_broker(via), workers() as started:
        worker = Worker("steady", broker_url=via)
        started.append(worker)
        worker.ready()
        site_import(doc=small_site())  # sent on commit, through the proxy
        wait_for(lambda: selectors.site_status(site="TST")["stale"] is False, "import", 60)
        site = inv.Site.objects.get(code="TST")
        beat = Beat()

        proxy.down()  # the broker is gone for every process
        logging.getLogger("analysis").addHandler(caught)
        try:
            ct = inv.CurrentTransformer.objects.get(site=site, code="CB-1-C")
            ct_change_tap(ct=ct, to=("X2", "X5"), by="tester")  # commits, no error
        finally:
            logging.getLogger("analysis").removeHandler(caught)
        site.refresh_from_db()
        change = inv.SiteChange.objects.get(site=site, revision=site.revision)
        assert (change.status, change.sent_at) == (ChangeStatus.PENDING, None)
        _wait_out(beat, 8.0)
        assert selectors.site_status(site="TST")["stale"] is True

        proxy.up()
        back = time.monotonic()

        def fresh() -> bool:
            beat.tick()
            return selectors.site_status(site="TST")["stale"] is False

        wait_for(fresh, "fresh results after the broker's return", BROKER_RECOVERY_BOUND_S + 30)
        recovery_s = time.monotonic() - back
    proxy.down()
    print(f"\nbroker cut during an edit: fresh {recovery_s:.1f} s after the broker's return")
    assert recovery_s < BROKER_RECOVERY_BOUND_S
    warnings = [r for r in caught.records if r.levelno >= logging.WARNING]
    assert len(warnings) == 1 and warnings[0].exc_info is None, caught.records
    assert "broker is unreachable" in warnings[0].getMessage()
    change.refresh_from_db()
    assert change.status == ChangeStatus.DONE
    # X2-X5 of the 0/100/150/400/600 winding is 500:5 (S4).
    assert selectors.ct_report(site="TST", ct="CB-1-C")[0]["ratio"] == "500:5"
    assert result_rows(site.pk) == one_set_of_rows(site.pk)


def _wait_out(beat: Beat, seconds: float) -> None:
    """The outage lasts ``seconds``; the sweeps meanwhile send nothing and give up nothing."""
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        beat.tick()
        time.sleep(0.2)
    assert not inv.SiteChange.objects.filter(status=ChangeStatus.FAILED).exists()


def test_one_bad_site_in_a_worker_chunk_fails_alone(settings):
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 10
    ids = _import_quietly("AAA", "BAD", "CCC")
    # 1e308 kA: accepted by the column, infinite figures the results cannot hold (JSON).
    inv.Bus.objects.filter(site__code="BAD").update(three_phase_fault_ka=1e308)
    with workers() as started:
        worker = Worker("one")
        started.append(worker)
        worker.ready()
        run = services.run_create(kind=RunKind.SITES, site_ids=ids)
        services.run_dispatch(run=run, on_commit=False)
        wait_for(lambda: _status(run.pk) in (RunStatus.SUCCESS, RunStatus.FAILURE), "run", 60)
    run.refresh_from_db()
    assert (run.status, run.sites_done, run.sites_failed) == (RunStatus.FAILURE, 3, 1)
    for code in ("AAA", "BAD", "CCC"):
        status = selectors.site_status(site=code)
        assert status["stale"] is False
        assert status["status"] == ("failed" if code == "BAD" else "ok")
    bad = selectors.findings_list(site="BAD", severity="danger")
    assert [f["code"] for f in bad] == ["results_not_computed"]
    for site_id, code in zip(ids, ("AAA", "BAD", "CCC"), strict=True):
        if code != "BAD":
            assert result_rows(site_id) == one_set_of_rows(site_id)


def test_import_while_the_broker_is_unreachable_prints_one_warning_line(tmp_path):
    proxy = Proxy()  # never up: connections refused
    doc = tmp_path / "site.json"
    doc.write_text(json.dumps(small_site("OUT")))
    env = {
        **os.environ,
        "DATABASE_URL": database_url(),
        "CELERY_BROKER_URL": broker_via(proxy.port),
        "DJANGO_SETTINGS_MODULE": "config.settings.test",
    }
    done = subprocess.run(
        [sys.executable, "manage.py", "import_site", str(doc)],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    assert "site OUT: created" in done.stdout
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "broker is unreachable" in lines[0], done.stderr
    change = inv.SiteChange.objects.get(site__code="OUT")
    assert (change.status, change.sent_at) == (ChangeStatus.PENDING, None)  # the sweep's
