"""``DATABASES`` from the environment (config/database.py): the pooling modes as Django documents
them (native pool: ``OPTIONS["pool"]`` with ``CONN_MAX_AGE`` 0, Django 5.1+ release notes and
"Connection pool" in the PostgreSQL notes; PgBouncer transaction mode:
``DISABLE_SERVER_SIDE_CURSORS``, "Transaction pooling and server-side cursors"; psycopg's
``prepare_threshold=None`` turns automatic prepared statements off, psycopg 3 docs "Prepared
statements"), and production's ``check --deploy`` with them."""

from __future__ import annotations

import secrets

import pytest
from django.core.exceptions import ImproperlyConfigured

from config.database import databases
from tests.test_settings import run_manage

PG = "postgres://loopkeep:pw@db.example.invalid:5432/loopkeep"
SQLITE = "sqlite:////tmp/never-opened.sqlite3"


def test_default_mode_keeps_persistent_connections():
    db = databases({"DATABASE_URL": PG, "DATABASE_CONN_MAX_AGE": "30"}, sqlite_default=SQLITE)
    assert set(db) == {"default"}
    assert db["default"]["CONN_MAX_AGE"] == 30
    assert "pool" not in db["default"].get("OPTIONS", {})


def test_native_pool_sets_django_pool_options_and_no_persistent_connections():
    env = {"DATABASE_URL": PG, "DATABASE_POOL": "native", "DATABASE_POOL_MAX_SIZE": "16"}
    db = databases(env, sqlite_default=SQLITE)["default"]
    assert db["OPTIONS"]["pool"] == {"min_size": 2, "max_size": 16, "timeout": 10.0}
    assert db["CONN_MAX_AGE"] == 0  # Django refuses a pool with persistent connections


def test_pgbouncer_mode_turns_off_server_side_cursors_and_prepared_statements():
    db = databases({"DATABASE_URL": PG, "DATABASE_POOL": "pgbouncer"}, sqlite_default=SQLITE)
    assert db["default"]["DISABLE_SERVER_SIDE_CURSORS"] is True
    assert db["default"]["OPTIONS"]["prepare_threshold"] is None
    assert "pool" not in db["default"]["OPTIONS"]


def test_replica_is_pooled_like_the_primary_and_mirrors_it_under_tests():
    env = {
        "DATABASE_URL": PG,
        "DATABASE_REPLICA_URL": PG.replace("db.", "replica."),
        "DATABASE_POOL": "pgbouncer",
    }
    db = databases(env, sqlite_default=SQLITE)
    assert db["replica"]["HOST"] == "replica.example.invalid"
    assert db["replica"]["DISABLE_SERVER_SIDE_CURSORS"] is True
    assert db["replica"]["TEST"] == {"MIRROR": "default"}


@pytest.mark.parametrize(
    ("env", "message"),
    [
        ({"DATABASE_POOL": "native"}, "DATABASE_POOL=native needs PostgreSQL"),
        ({"DATABASE_URL": PG, "DATABASE_POOL": "bouncer"}, "DATABASE_POOL='bouncer'"),
    ],
)
def test_bad_pool_settings_are_refused_with_the_variable_named(env, message):
    with pytest.raises(ImproperlyConfigured, match=message):
        databases(env, sqlite_default=SQLITE)


@pytest.mark.parametrize("pool", ["native", "pgbouncer"])
def test_production_check_deploy_is_clean_with_pooling_and_a_replica(pool):
    result = run_manage(
        "check",
        "--deploy",
        "--fail-level",
        "WARNING",
        DJANGO_SETTINGS_MODULE="config.settings.production",
        SECRET_KEY=secrets.token_urlsafe(64),
        ALLOWED_HOSTS="loopkeep.example.invalid",
        DATABASE_URL=PG,
        DATABASE_REPLICA_URL=PG.replace("db.", "replica."),
        DATABASE_POOL=pool,
        LOG_FORMAT="json",
    )
    assert result.returncode == 0, result.stderr
    assert "System check identified no issues (0 silenced)." in result.stdout
