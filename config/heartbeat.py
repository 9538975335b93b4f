"""Worker and beat heartbeats in the broker's Redis, for ``/ready/``.

Every Celery worker sends itself a heartbeat every few seconds (Celery's ``heartbeat_sent``
signal, on unless the worker runs ``--without-heartbeat``); ``config.celery`` writes it here as
one key per worker, ``loopkeep:worker:<hostname>`` (after ``CELERY_BROKER_KEY_PREFIX``),
holding the queues it consumes and the time, expiring after ``KEY_TTL_S``. A key is also
written when the worker is ready and removed when it shuts down. Readers compare the time
with their own bound (``READY_WORKER_HEARTBEAT_S``).

Celery beat writes its own key, ``loopkeep:beat``, from its scheduler loop
(``config.beat.HeartbeatScheduler``), so ``/ready/`` knows the periodic sweeps are being sent
(``READY_BEAT_HEARTBEAT_S``).
"""

from __future__ import annotations

import json
import os
import time
from typing import Any

import redis

PREFIX = "loopkeep:worker:"
BEAT_KEY = "loopkeep:beat"


def _installation() -> str:
    """The broker's key prefix (one Redis shared by installations), or ""."""
    from django.conf import settings

    options = getattr(settings, "CELERY_BROKER_TRANSPORT_OPTIONS", {}) or {}
    return str(options.get("global_keyprefix", ""))


def key_prefix() -> str:
    """The worker keys' prefix: the broker's key prefix first."""
    return _installation() + PREFIX


def beat_key() -> str:
    """The beat's key: the broker's key prefix first."""
    return _installation() + BEAT_KEY


KEY_TTL_S = 300

_clients: dict[str, redis.Redis] = {}


def client(url: str) -> redis.Redis:
    """One client per broker URL and process, with short timeouts (a health check must not
    hang on a dead server)."""
    if url not in _clients:
        _clients[url] = redis.Redis.from_url(
            url, socket_timeout=2, socket_connect_timeout=2, health_check_interval=30
        )
    return _clients[url]


def beat(url: str, *, hostname: str, queues: list[str]) -> None:
    value = json.dumps(
        {"hostname": hostname, "queues": queues, "at": time.time(), "pid": os.getpid()}
    )
    client(url).set(key_prefix() + hostname, value, ex=KEY_TTL_S)


def gone(url: str, *, hostname: str) -> None:
    client(url).delete(key_prefix() + hostname)


def workers(url: str) -> list[dict[str, Any]]:
    """Every worker heard of in the last ``KEY_TTL_S`` s, with ``age_s``."""
    r = client(url)
    keys = sorted(r.scan_iter(match=key_prefix() + "*", count=200))
    now = time.time()
    out = []
    values: list[Any] = list(r.mget(keys)) if keys else []  # type: ignore[arg-type]
    for raw in values:
        if raw is None:  # expired between the scan and the read
            continue
        entry = json.loads(raw)
        entry["age_s"] = round(max(0.0, now - float(entry["at"])), 1)
        out.append(entry)
    return out


def beat_alive(url: str, *, hostname: str) -> None:
    """Celery beat is alive (written from its scheduler loop)."""
    value = json.dumps({"hostname": hostname, "at": time.time(), "pid": os.getpid()})
    client(url).set(beat_key(), value, ex=KEY_TTL_S)


def beat_last(url: str) -> dict[str, Any] | None:
    """The beat's last heartbeat with ``age_s``, or None when none in the last ``KEY_TTL_S``."""
    raw = client(url).get(beat_key())
    if raw is None:
        return None
    entry: dict[str, Any] = json.loads(raw)  # type: ignore[arg-type]  # bytes from redis
    entry["age_s"] = round(max(0.0, time.time() - float(entry["at"])), 1)
    return entry
