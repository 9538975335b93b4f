"""Structured logs: who and what a log line belongs to, for the web and the workers alike.

Context variables hold the request id, user, site, Celery task and analysis run of the code
running now; ``ContextFilter`` (on the handler) copies them onto every record, so any logger's
line carries them; ``LOG_FORMAT=json`` writes one JSON object per line (python-json-logger),
``text`` a readable line. ``RequestContextMiddleware`` fills the context for a request and the
Celery signals in ``config.celery`` for a task.
"""

from __future__ import annotations

import logging
from contextvars import ContextVar
from typing import Any

from django.utils.functional import SimpleLazyObject, empty

request_id: ContextVar[str | None] = ContextVar("loopkeep_request_id", default=None)
request_obj: ContextVar[Any] = ContextVar("loopkeep_request", default=None)
site: ContextVar[str | None] = ContextVar("loopkeep_site", default=None)
task_id: ContextVar[str | None] = ContextVar("loopkeep_task_id", default=None)
task_name: ContextVar[str | None] = ContextVar("loopkeep_task_name", default=None)
run_id: ContextVar[int | None] = ContextVar("loopkeep_run_id", default=None)
user_name: ContextVar[str | None] = ContextVar("loopkeep_user", default=None)

FIELDS = ("request_id", "user", "site", "task_id", "task", "run_id")

# The tasks whose first argument is an ``analysis.AnalysisRun`` id.
RUN_TASKS = frozenset({"analysis.recompute_run", "analysis.recompute_chunk"})


def current_user() -> str | None:
    """The signed-in user of the current request, without asking the database: Django's lazy
    user is read only once something else evaluated it (DRF's token authentication sets the
    real user on the request)."""
    explicit = user_name.get()
    if explicit is not None:
        return explicit
    request = request_obj.get()
    if request is None:
        return None
    user = request.__dict__.get("user")
    if user is None:
        return None
    if isinstance(user, SimpleLazyObject):
        wrapped = user.__dict__.get("_wrapped", empty)
        if wrapped is empty:
            return None
        user = wrapped
    if not getattr(user, "is_authenticated", False):
        return None
    return str(user.get_username())


def context() -> dict[str, Any]:
    return {
        "request_id": request_id.get(),
        "user": current_user(),
        "site": site.get(),
        "task_id": task_id.get(),
        "task": task_name.get(),
        "run_id": run_id.get(),
    }


class ContextFilter(logging.Filter):
    """Adds the context fields to every record (None when not set)."""

    def filter(self, record: logging.LogRecord) -> bool:
        for key, value in context().items():
            if not hasattr(record, key):
                setattr(record, key, value)
        return True


def logging_config(*, fmt: str, level: str) -> dict[str, Any]:
    """The ``LOGGING`` setting: one console handler, JSON lines or text."""
    if fmt not in {"json", "text"}:
        raise ValueError(f"LOG_FORMAT={fmt!r}: expected 'json' or 'text'")
    formatters = {
        "json": {
            "()": "pythonjsonlogger.json.JsonFormatter",
            "fmt": "%(asctime)s %(levelname)s %(name)s %(message)s "
            + " ".join(f"%({f})s" for f in FIELDS),
            "rename_fields": {"asctime": "time", "levelname": "level", "name": "logger"},
            "timestamp": False,
        },
        "text": {
            "format": "%(asctime)s %(levelname)s %(name)s [req=%(request_id)s user=%(user)s "
            "site=%(site)s run=%(run_id)s] %(message)s",
        },
    }
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "filters": {"context": {"()": "config.logs.ContextFilter"}},
        "formatters": {fmt: formatters[fmt]},
        "handlers": {
            "console": {
                "class": "logging.StreamHandler",
                "formatter": fmt,
                "filters": ["context"],
            }
        },
        "root": {"handlers": ["console"], "level": level},
    }
