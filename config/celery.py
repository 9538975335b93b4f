"""The Celery application.

With ``CELERY_BROKER_URL`` unset (the embedded default) tasks run in-process, eagerly, so the demo
works with no other server; with it set, the same tasks run on real workers.

The signals below give workers the same logs as the web (Django's ``LOGGING``: JSON lines with
``LOG_FORMAT=json``, each with the task id and, for analysis runs, the run id) and write each
worker's heartbeat for ``/ready/`` (``config.heartbeat``).
"""

import logging
import logging.config
import os
from typing import Any

from celery import Celery, signals

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings.local")

app = Celery("loopkeep")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks()

log = logging.getLogger(__name__)
_worker: dict[str, Any] = {"hostname": None, "queues": []}


@signals.setup_logging.connect
def _configure_logging(loglevel: Any = None, **kwargs: Any) -> None:
    # Connected: Celery leaves the logging to Django's LOGGING instead of its own format; the
    # command line's --loglevel still sets the level.
    from django.conf import settings

    logging.config.dictConfig(settings.LOGGING)
    if loglevel:
        logging.getLogger().setLevel(loglevel)


@signals.task_prerun.connect
def _task_context(task_id: str, task: Any, args: Any = None, **kwargs: Any) -> None:
    from config import logs

    logs.task_id.set(task_id)
    logs.task_name.set(task.name)
    run = args[0] if args and task.name in logs.RUN_TASKS else None
    logs.run_id.set(run if isinstance(run, int) else None)


@signals.task_postrun.connect
def _task_context_clear(**kwargs: Any) -> None:
    from config import logs

    for var in (logs.task_id, logs.task_name, logs.run_id):
        var.set(None)


def _broker_url() -> str:
    from django.conf import settings

    return str(settings.CELERY_BROKER_URL)


@signals.worker_ready.connect
def _worker_ready(sender: Any, **kwargs: Any) -> None:
    _worker["hostname"] = sender.hostname
    _worker["queues"] = sorted(q.name for q in sender.task_consumer.queues)
    _heartbeat()


@signals.heartbeat_sent.connect
def _heartbeat(**kwargs: Any) -> None:
    if not _worker["hostname"] or not _broker_url():
        return
    from config import heartbeat

    try:
        heartbeat.beat(_broker_url(), hostname=_worker["hostname"], queues=_worker["queues"])
    except Exception as exc:  # the broker is away: the worker's own reconnect handles it
        log.warning("worker heartbeat not written: %s", exc)


@signals.worker_shutdown.connect
def _worker_gone(**kwargs: Any) -> None:
    if not _worker["hostname"] or not _broker_url():
        return
    from config import heartbeat

    try:
        heartbeat.gone(_broker_url(), hostname=_worker["hostname"])
    except Exception as exc:
        log.warning("worker heartbeat not removed: %s", exc)
