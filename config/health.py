"""``/health/`` (liveness) and ``/ready/`` (readiness), plain Django views without
authentication, for load balancers, systemd/docker health checks and operators.

- ``/health/``: the web process answers. Touches nothing else (no database), so a database
  outage does not make the process manager restart healthy web processes.
- ``/ready/``: can this installation do its work now? The database (and the replica, when
  configured), the broker, a heartbeat from a worker of every required queue within
  ``READY_WORKER_HEARTBEAT_S``, a heartbeat from Celery beat within ``READY_BEAT_HEARTBEAT_S``
  (beat sends the sweeps that re-send lost recomputes, so without it a lost message stays
  lost), and the age of the oldest pending recompute request (outbox row) within
  ``READY_MAX_PENDING_AGE_S``. The number of sites whose stored results are stale is reported
  too, as information: right after an edit it is normal for a few seconds. Every check has
  ``ok`` and its figures; the status is 200 when all pass, else 503. In the embedded mode (no
  broker: jobs in the web process) no beat runs, so nothing sends the periodic sweeps: the
  ``beat`` check passes as ``degraded`` and the body lists it under ``degraded`` (200).

Why not django-health-check (4.8.0 checked: it supports Django 5.2): its JSON body is one
string per check ("OK" or the error), while readiness here is mostly figures an operator reads
(heartbeat ages per queue, pending requests and the age of the oldest, stale sites), and its
Celery check is a broadcast ``ping`` that waits out its timeout on every call; the heartbeat
keys answer at once. The checks are a few lines each.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

from django.conf import settings
from django.db import connections
from django.http import HttpRequest, JsonResponse
from django.utils import timezone
from django.views.decorators.cache import never_cache
from django.views.decorators.http import require_GET

from config import heartbeat
from config.database import REPLICA
from config.routers import replica_enabled


@never_cache
@require_GET
def health(request: HttpRequest) -> JsonResponse:
    return JsonResponse({"status": "alive", "time": timezone.now().isoformat()})


def _timed(check: Callable[[], dict[str, Any]]) -> dict[str, Any]:
    t0 = time.perf_counter()
    try:
        out = check()
    except Exception as exc:  # any failure of a dependency is the answer, not an error
        out = {"ok": False, "error": f"{type(exc).__name__}: {exc}"[:500]}
    out["ms"] = round((time.perf_counter() - t0) * 1000, 1)
    return out


def _database(alias: str) -> Callable[[], dict[str, Any]]:
    def check() -> dict[str, Any]:
        with connections[alias].cursor() as cursor:
            cursor.execute("SELECT 1")
            cursor.fetchone()
        return {"ok": True}

    return check


def _broker() -> dict[str, Any]:
    heartbeat.client(settings.CELERY_BROKER_URL).ping()
    return {"ok": True}


def _workers() -> dict[str, Any]:
    bound = float(settings.READY_WORKER_HEARTBEAT_S)
    heard = heartbeat.workers(settings.CELERY_BROKER_URL)
    queues: dict[str, dict[str, Any]] = {}
    for name in settings.READY_QUEUES:
        live = [w for w in heard if name in w["queues"] and w["age_s"] <= bound]
        ages = [w["age_s"] for w in heard if name in w["queues"]]
        queues[name] = {"workers": len(live), "newest_heartbeat_age_s": min(ages, default=None)}
    return {
        "ok": all(q["workers"] > 0 for q in queues.values()),
        "max_heartbeat_age_s": bound,
        "queues": queues,
        "workers": [
            {k: w[k] for k in ("hostname", "queues", "age_s")}
            for w in sorted(heard, key=lambda w: w["hostname"])
        ],
    }


def _beat() -> dict[str, Any]:
    bound = float(settings.READY_BEAT_HEARTBEAT_S)
    last = heartbeat.beat_last(settings.CELERY_BROKER_URL)
    age = None if last is None else last["age_s"]
    out: dict[str, Any] = {
        "ok": age is not None and age <= bound,
        "heartbeat_age_s": age,
        "max_heartbeat_age_s": bound,
    }
    if last is None:
        out["error"] = "no heartbeat from celery beat: the periodic sweeps are not being sent"
    return out


def _requests() -> dict[str, Any]:
    from analysis.selectors import pending_requests

    bound = float(settings.READY_MAX_PENDING_AGE_S)
    pending, oldest = pending_requests()
    age = None if oldest is None else round((timezone.now() - oldest).total_seconds(), 1)
    return {
        "ok": age is None or age <= bound,
        "pending": pending,
        "oldest_pending_age_s": age,
        "max_age_s": bound,
    }


def _results() -> dict[str, Any]:
    from analysis.selectors import stale_site_count

    return {"ok": True, "stale_sites": stale_site_count(), "note": "information, not a failure"}


@never_cache
@require_GET
def ready(request: HttpRequest) -> JsonResponse:
    checks: dict[str, dict[str, Any]] = {"database": _timed(_database("default"))}
    if replica_enabled():  # the replica answers the API's reads
        checks["replica"] = _timed(_database(REPLICA))
    if settings.CELERY_TASK_ALWAYS_EAGER:
        skipped = {"ok": True, "skipped": "no broker: jobs run in the web process"}
        checks["broker"] = dict(skipped)
        checks["workers"] = dict(skipped)
        checks["beat"] = {
            "ok": True,
            "degraded": True,
            "skipped": "no broker: no beat runs, so the periodic sweeps, the nightly "
            "recompute and the daily prunes do not run (edits are computed in-process)",
        }
    else:
        checks["broker"] = _timed(_broker)
        for name, check in (("workers", _workers), ("beat", _beat)):
            checks[name] = (
                _timed(check)
                if checks["broker"]["ok"]
                else {"ok": False, "error": "broker unreachable"}
            )
    if checks["database"]["ok"]:
        checks["recompute_requests"] = _timed(_requests)
        checks["results"] = _timed(_results)
    ok = all(c["ok"] for c in checks.values())
    body = {
        "status": "ready" if ok else "not ready",
        "time": timezone.now().isoformat(),
        "checks": checks,
        "degraded": sorted(name for name, c in checks.items() if c.get("degraded")),
    }
    return JsonResponse(body, status=200 if ok else 503)
