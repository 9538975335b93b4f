"""A heartbeat thread: while a block of work runs, a thread of this process calls ``stamp``
every ``every_s`` seconds (on the thread's own database connection, so it beats through long
computations and open write transactions alike). It stops with the block, and with the
process: a worker killed with ``kill -9`` stops beating, which is how the sweeps see it died.
Used by the recompute chunks (``analysis.services.runs``) and the import jobs
(``inventory.imports``)."""

from __future__ import annotations

import contextlib
import logging
import threading
from collections.abc import Callable, Iterator

from django.db import connections

log = logging.getLogger(__name__)


@contextlib.contextmanager
def beating(stamp: Callable[[], object], *, every_s: float, label: str) -> Iterator[None]:
    """Call ``stamp`` every ``every_s`` s while the block runs; ``label`` names the work in
    the thread's name and in the warning logged when a stamp fails (the database away for a
    moment: it beats again at the next period)."""
    stop = threading.Event()

    def beat() -> None:
        try:
            while not stop.wait(every_s):
                try:
                    stamp()
                except Exception as exc:
                    log.warning("heartbeat of %s: %s", label, exc)
        finally:
            connections.close_all()  # this thread's connections only

    thread = threading.Thread(target=beat, name=f"heartbeat {label}", daemon=True)
    thread.start()
    try:
        yield
    finally:
        stop.set()
        thread.join(every_s + 10)
