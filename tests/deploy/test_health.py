"""``/health/`` and ``/ready/`` (config/health.py). The bounds and the JSON shape are this
project's own (deploy/README.md); "liveness touches no database" is common practice, no source:
a database outage must not make the process manager restart healthy web processes."""

from __future__ import annotations

import datetime as dt
import json
import os
import socket
import time

import pytest
from django.test import Client
from django.utils import timezone

from analysis import services
from config import heartbeat
from inventory import models as inv
from inventory.services import site_import
from tests.inventory.docs import small_site


def test_health_answers_without_the_database():
    # No ``db`` fixture: pytest-django refuses any query, so a 200 proves none was made.
    response = Client().get("/health/")
    assert response.status_code == 200
    assert response.json()["status"] == "alive"
    assert response["Cache-Control"].startswith("max-age=0")


@pytest.mark.django_db
def test_ready_in_process_mode_checks_the_database_and_the_requests(settings):
    settings.CELERY_TASK_ALWAYS_EAGER = True
    with services.recompute_deferred():
        site_import(doc=small_site())
    body = Client().get("/ready/").json()
    checks = body["checks"]
    assert body["status"] == "ready", body
    assert checks["database"]["ok"] is True
    assert checks["broker"]["skipped"] and checks["workers"]["skipped"]
    # no beat in this mode: reported, degraded, not a failure
    assert checks["beat"]["ok"] is True and checks["beat"]["degraded"] is True
    assert "periodic sweeps" in checks["beat"]["skipped"]
    assert body["degraded"] == ["beat"]
    assert checks["recompute_requests"]["pending"] == 1  # the import's, not sent (deferred)
    assert checks["results"]["stale_sites"] == 1  # never computed
    assert "replica" not in checks


@pytest.mark.django_db
def test_ready_is_503_when_a_recompute_request_waits_too_long(settings):
    settings.CELERY_TASK_ALWAYS_EAGER = True
    settings.READY_MAX_PENDING_AGE_S = 600
    with services.recompute_deferred():
        site_import(doc=small_site())
    inv.SiteChange.objects.update(created_at=timezone.now() - dt.timedelta(minutes=15))
    response = Client().get("/ready/")
    assert response.status_code == 503
    requests = response.json()["checks"]["recompute_requests"]
    assert requests["ok"] is False and 890 < requests["oldest_pending_age_s"] < 1000
    assert response.json()["status"] == "not ready"


def _closed_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture
def broker_mode(settings):
    settings.CELERY_TASK_ALWAYS_EAGER = False
    settings.CELERY_BROKER_URL = os.environ.get("CELERY_BROKER_URL", "")
    settings.READY_QUEUES = ["recompute", "imports"]
    settings.READY_WORKER_HEARTBEAT_S = 30
    r = heartbeat.client(settings.CELERY_BROKER_URL)
    for key in r.scan_iter(match=heartbeat.key_prefix() + "*"):
        r.delete(key)
    r.delete(heartbeat.beat_key())
    yield settings.CELERY_BROKER_URL
    for key in r.scan_iter(match=heartbeat.key_prefix() + "*"):
        r.delete(key)
    r.delete(heartbeat.beat_key())


@pytest.mark.broker
@pytest.mark.django_db
def test_ready_needs_a_recent_worker_heartbeat_on_every_queue(broker_mode):
    url = broker_mode
    heartbeat.beat_alive(url, hostname="beat-host")  # beat is up (its own test below)
    response = Client().get("/ready/")
    assert response.status_code == 503
    workers = response.json()["checks"]["workers"]
    assert workers["queues"]["recompute"]["workers"] == 0
    assert response.json()["checks"]["broker"]["ok"] is True

    heartbeat.beat(url, hostname="recompute@a", queues=["recompute"])
    assert Client().get("/ready/").status_code == 503  # nobody takes imports yet
    heartbeat.beat(url, hostname="imports@a", queues=["imports", "default"])
    response = Client().get("/ready/")
    assert response.status_code == 200, response.json()
    assert response.json()["checks"]["workers"]["queues"]["imports"]["workers"] == 1

    # A heartbeat older than the bound does not count (the worker hangs or died unclean).
    old = {"hostname": "imports@a", "queues": ["imports"], "at": time.time() - 120, "pid": 1}
    heartbeat.client(url).set(heartbeat.key_prefix() + "imports@a", json.dumps(old))
    response = Client().get("/ready/")
    assert response.status_code == 503
    assert response.json()["checks"]["workers"]["queues"]["imports"] == {
        "workers": 0,
        "newest_heartbeat_age_s": pytest.approx(120, abs=5),
    }


@pytest.mark.broker
@pytest.mark.django_db
def test_ready_needs_a_recent_heartbeat_from_beat(broker_mode, tmp_path):
    """Beat's scheduler loop writes the heartbeat (config.beat); /ready/ fails without a recent
    one, with the figures. Bounds: this project's own (deploy/README.md)."""
    from celery import Celery

    from config.beat import HeartbeatScheduler

    url = broker_mode
    for queue in ("recompute", "imports"):
        heartbeat.beat(url, hostname=f"{queue}@a", queues=[queue])
    response = Client().get("/ready/")
    assert response.status_code == 503
    beat = response.json()["checks"]["beat"]
    assert beat["ok"] is False and beat["heartbeat_age_s"] is None
    assert "no heartbeat from celery beat" in beat["error"]

    # A scheduler pass as `celery beat` makes it (an app with nothing scheduled: nothing sent).
    quiet = Celery("beat-test", broker=url, set_as_current=False)
    quiet.conf.beat_schedule = {}
    scheduler = HeartbeatScheduler(app=quiet, schedule_filename=str(tmp_path / "schedule"))
    try:
        assert scheduler.tick() > 0
    finally:
        scheduler.close()
    response = Client().get("/ready/")
    assert response.status_code == 200, response.json()
    beat = response.json()["checks"]["beat"]
    assert beat["ok"] is True and beat["heartbeat_age_s"] < 5
    assert response.json()["degraded"] == []

    stale = {"hostname": "beat-host", "at": time.time() - 120, "pid": 1}
    heartbeat.client(url).set(heartbeat.beat_key(), json.dumps(stale))
    response = Client().get("/ready/")
    assert response.status_code == 503
    beat = response.json()["checks"]["beat"]
    assert beat["ok"] is False and beat["heartbeat_age_s"] == pytest.approx(120, abs=5)


def test_celery_beat_runs_the_heartbeat_scheduler():
    from celery.utils.imports import symbol_by_name

    from config.beat import HeartbeatScheduler
    from config.celery import app

    assert symbol_by_name(app.conf.beat_scheduler) is HeartbeatScheduler
    assert app.conf.beat_max_loop_interval <= 15  # a pass, and so a heartbeat, every 15 s


@pytest.mark.django_db
def test_ready_reports_an_unreachable_broker(settings):
    settings.CELERY_TASK_ALWAYS_EAGER = False
    settings.CELERY_BROKER_URL = f"redis://127.0.0.1:{_closed_port()}/0"
    response = Client().get("/ready/")
    assert response.status_code == 503
    checks = response.json()["checks"]
    assert checks["broker"]["ok"] is False and "ConnectionError" in checks["broker"]["error"]
    assert checks["workers"] == {"ok": False, "error": "broker unreachable"}
    assert checks["beat"] == {"ok": False, "error": "broker unreachable"}
    assert checks["database"]["ok"] is True
