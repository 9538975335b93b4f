"""``DATABASES`` from the environment: the primary, its connection pooling and an optional read
replica. Plain functions of a mapping (``os.environ`` in the settings) so tests can call them.

Pooling (``DATABASE_POOL``), one of:

- ``none`` (default): one connection per web thread / worker process, kept ``DATABASE_CONN_MAX_AGE``
  seconds (Django's persistent connections).
- ``native``: Django's own psycopg 3 pool (``OPTIONS["pool"]``, Django 5.1+): each process keeps
  ``DATABASE_POOL_MIN_SIZE``..``DATABASE_POOL_MAX_SIZE`` open connections and lends one per
  request or task; a request waits at most ``DATABASE_POOL_TIMEOUT`` s for one. Django requires
  ``CONN_MAX_AGE = 0`` with a pool (the pool, not the request, keeps the connection).
- ``pgbouncer``: ``DATABASE_URL`` points at PgBouncer in *transaction* pooling mode. A server
  connection changes hands between transactions, so nothing may outlive one: no server-side
  cursors (``DISABLE_SERVER_SIDE_CURSORS``, Django's documented setting for this) and no
  prepared statements (psycopg prepares a query after 5 runs: ``prepare_threshold = None``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import dj_database_url
from django.core.exceptions import ImproperlyConfigured

POOL_MODES = ("none", "native", "pgbouncer")
REPLICA = "replica"


def _pooled(config: dict[str, Any], env: Mapping[str, str], mode: str) -> dict[str, Any]:
    if mode == "none":
        return config
    if config["ENGINE"] != "django.db.backends.postgresql":
        raise ImproperlyConfigured(f"DATABASE_POOL={mode} needs PostgreSQL (DATABASE_URL)")
    options = config.setdefault("OPTIONS", {})
    if mode == "native":
        options["pool"] = {
            "min_size": int(env.get("DATABASE_POOL_MIN_SIZE", "2")),
            "max_size": int(env.get("DATABASE_POOL_MAX_SIZE", "10")),
            "timeout": float(env.get("DATABASE_POOL_TIMEOUT", "10")),
        }
        config["CONN_MAX_AGE"] = 0
    else:  # pgbouncer, transaction mode
        config["DISABLE_SERVER_SIDE_CURSORS"] = True
        options["prepare_threshold"] = None
    return config


def databases(env: Mapping[str, str], *, sqlite_default: str) -> dict[str, dict[str, Any]]:
    """The ``DATABASES`` setting: ``default`` from ``DATABASE_URL`` (SQLite file when unset)
    and, with ``DATABASE_REPLICA_URL``, a ``replica`` alias pooled the same way."""
    mode = env.get("DATABASE_POOL", "none").strip().lower() or "none"
    if mode not in POOL_MODES:
        raise ImproperlyConfigured(f"DATABASE_POOL={mode!r}: expected one of {POOL_MODES}")
    max_age = int(env.get("DATABASE_CONN_MAX_AGE", "60"))
    default: dict[str, Any] = dict(
        dj_database_url.parse(env.get("DATABASE_URL") or sqlite_default, conn_max_age=max_age)
    )
    if default["ENGINE"] == "django.db.backends.sqlite3":
        # SQLite is the embedded default; WAL lets the in-process jobs read while a write commits.
        default["CONN_MAX_AGE"] = 0
        default.setdefault("OPTIONS", {})
        default["OPTIONS"].update(
            {"init_command": "PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL;", "timeout": 20}
        )
    out = {"default": _pooled(default, env, mode)}
    replica_url = env.get("DATABASE_REPLICA_URL", "").strip()
    if replica_url:
        replica = _pooled(dict(dj_database_url.parse(replica_url, conn_max_age=max_age)), env, mode)
        # Under a test runner the replica is the primary's test database, as on a real replica.
        replica["TEST"] = {"MIRROR": "default"}
        out[REPLICA] = replica
    return out
