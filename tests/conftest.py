"""Shared test set-up.

Tests marked ``postgres`` or ``broker`` need the real servers. Outside CI they are skipped when
the server is missing; under ``CI=true`` they fail instead, so a missing service can never pass
as green.
"""

from __future__ import annotations

import os
import socket
from urllib.parse import urlparse

import pytest

IN_CI = os.environ.get("CI", "").strip().lower() in {"1", "true", "yes"}


def _missing(reason: str) -> None:
    if IN_CI:
        pytest.fail(f"{reason} (CI=true: a missing service is a failure, not a skip)")
    pytest.skip(reason)


def broker_reachable(url: str) -> bool:
    parsed = urlparse(url)
    try:
        with socket.create_connection((parsed.hostname or "127.0.0.1", parsed.port or 6379), 2):
            return True
    except OSError:
        return False


@pytest.fixture(autouse=True)
def _require_services(request: pytest.FixtureRequest) -> None:
    if request.node.get_closest_marker("postgres"):
        from django.db import connection

        if connection.vendor != "postgresql":
            _missing(f"needs PostgreSQL (DATABASE_URL), the test database is {connection.vendor}")
    if request.node.get_closest_marker("broker"):
        url = os.environ.get("CELERY_BROKER_URL", "")
        if not url or not broker_reachable(url):
            _missing(f"needs a reachable Celery broker (CELERY_BROKER_URL={url!r})")


@pytest.fixture
def eager():
    """Jobs in-process (the embedded default), even when the suite runs with a broker
    configured. Directories whose every test needs it use it from an autouse fixture."""
    from config.celery import app

    before = app.conf.task_always_eager
    app.conf.task_always_eager = True
    yield
    app.conf.task_always_eager = before


@pytest.fixture(autouse=True)
def _fresh_answer_caches() -> None:
    """Answers are kept by (site id, revision), which a rolled-back test database hands out
    again to another site: every test starts with empty caches."""
    from django.core.cache import cache

    from analysis import actions

    cache.clear()
    actions.clear_kept()
