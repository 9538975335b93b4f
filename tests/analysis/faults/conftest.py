"""Fixtures of the fault tests."""

from __future__ import annotations

import pytest

from config.celery import app


@pytest.fixture
def eager():
    """The embedded default (jobs in-process), even when the suite runs with a broker."""
    before = app.conf.task_always_eager
    app.conf.task_always_eager = True
    yield
    app.conf.task_always_eager = before
