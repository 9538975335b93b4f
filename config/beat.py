"""Celery beat's scheduler with a heartbeat: each pass of beat's loop writes ``loopkeep:beat``
in the broker's Redis (``config.heartbeat``), at most every ``EVERY_S`` seconds, so ``/ready/``
can tell that beat runs and sends the periodic sweeps. The loop passes at least every
``CELERY_BEAT_MAX_LOOP_INTERVAL`` seconds whatever the schedule.

Why in beat's own loop and not a periodic task a worker runs: a task would prove beat, the
broker and a free worker at once, and a worker busy with a long task would make a live beat
look dead; the workers have their own heartbeat (``/ready/``'s ``workers``).
"""

from __future__ import annotations

import logging
import socket
import time
from typing import Any

from celery.beat import PersistentScheduler

log = logging.getLogger(__name__)

EVERY_S = 5.0


class HeartbeatScheduler(PersistentScheduler):
    """Celery's default scheduler (the schedule kept in ``--schedule``'s file), plus the
    heartbeat. A heartbeat that cannot be written (the broker away) is a warning, never a
    stop: beat keeps sending what it can."""

    _last_beat = 0.0

    def tick(self, *args: Any, **kwargs: Any) -> float:
        interval: float = super().tick(*args, **kwargs)
        self.heartbeat()
        return interval

    def heartbeat(self, *, force: bool = False) -> None:
        now = time.monotonic()
        if not force and now - self._last_beat < EVERY_S:
            return
        self._last_beat = now
        from config import heartbeat

        try:
            heartbeat.beat_alive(str(self.app.conf.broker_url), hostname=socket.gethostname())
        except Exception as exc:
            log.warning("beat heartbeat not written: %s", exc)
