"""Real servers for the fault tests: Celery worker processes on the test database and the
test broker (``CELERY_BROKER_URL``), and a TCP proxy in front of Redis that can be cut and
restored (a broker outage without stopping the machine's Redis, which others use)."""

from __future__ import annotations

import contextlib
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from urllib.parse import quote, urlparse, urlunparse

from django.db import connection

from config.celery import app

ROOT = Path(__file__).resolve().parents[3]
RECOMPUTE_TASKS = ("analysis.recompute_run", "analysis.recompute_chunk")


def wait_for(check: Callable[[], bool], what: str, timeout_s: float, every_s: float = 0.2) -> float:
    """Poll until ``check()``; returns the seconds it took."""
    start = time.monotonic()
    while time.monotonic() - start < timeout_s:
        if check():
            return time.monotonic() - start
        time.sleep(every_s)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


def database_url() -> str:
    """The test database (the one pytest-django made) as a URL for the worker processes."""
    s = connection.settings_dict
    auth = quote(s["USER"] or "")
    if s.get("PASSWORD"):
        auth += ":" + quote(s["PASSWORD"])
    return f"postgres://{auth}@{s['HOST'] or '127.0.0.1'}:{s['PORT'] or 5432}/{s['NAME']}"


def queues() -> str:
    """Every queue the recompute tasks are routed to (and the default one)."""
    names = {app.conf.task_default_queue}
    for task in RECOMPUTE_TASKS:
        queue = app.amqp.router.route({}, task).get("queue")
        if queue is not None:
            names.add(getattr(queue, "name", queue))
    return ",".join(sorted(names))


def broker_via(port: int) -> str:
    url = urlparse(os.environ["CELERY_BROKER_URL"])
    return urlunparse(url._replace(netloc=f"127.0.0.1:{port}"))


class Worker:
    """One worker process (solo pool: the task runs in the process that is killed)."""

    def __init__(self, name: str, *, broker_url: str | None = None, slow_site_s: float = 0) -> None:
        env = {
            **os.environ,
            "DATABASE_URL": database_url(),
            "DJANGO_SETTINGS_MODULE": "config.settings.test",
            "FAULTS_SLOW_SITE_S": str(slow_site_s),
        }
        if broker_url:
            env["CELERY_BROKER_URL"] = broker_url
        self.name = f"{name}-{os.getpid()}@faults"
        self.log = Path(os.environ.get("TMPDIR", "/tmp")) / f"loopkeep-{self.name}.log"
        self.proc = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "tests.analysis.faults.worker_main",
                "--pool=solo",
                "--without-mingle",
                "--without-gossip",
                "--loglevel=WARNING",
                f"--hostname={self.name}",
                f"--queues={queues()}",
            ],
            cwd=ROOT,
            env=env,
            stdout=subprocess.DEVNULL,
            stderr=self.log.open("wb"),
            start_new_session=True,  # its own process group: killed as a whole
        )

    def ready(self, timeout_s: float = 60) -> None:
        wait_for(
            lambda: bool(app.control.ping(destination=[self.name], timeout=0.5)),
            f"worker {self.name} to answer a ping",
            timeout_s,
            every_s=0,
        )

    def kill(self) -> None:
        """SIGKILL to the worker's whole process group: no goodbye, no acknowledgement."""
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)
        self.proc.wait(30)

    def stop(self) -> None:
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGTERM)
            try:
                self.proc.wait(30)
            except subprocess.TimeoutExpired:
                self.kill()

    def stderr(self) -> str:
        return self.log.read_text(errors="replace") if self.log.exists() else ""


@contextlib.contextmanager
def workers() -> Iterator[list[Worker]]:
    """Workers started in the block are stopped at its end (before the test's tables are
    flushed), and the broker's leftovers of a killed worker are cleared."""
    started: list[Worker] = []
    try:
        yield started
    finally:
        for w in started:
            w.stop()
        app.control.purge()
        _clear_unacked()


def _clear_unacked() -> None:
    """A killed worker's message stays in Redis's unacknowledged set until the visibility
    timeout; clear it so it does not reach a later test run (this test database only)."""
    import redis

    prefix = os.environ.get("CELERY_BROKER_KEY_PREFIX", "")
    client = redis.Redis.from_url(os.environ["CELERY_BROKER_URL"])
    client.delete(*(prefix + key for key in ("unacked", "unacked_index", "unacked_mutex")))


class Proxy:
    """A TCP proxy to the broker that can be cut (every connection dropped, new ones refused)
    and restored on the same port."""

    def __init__(self) -> None:
        url = urlparse(os.environ["CELERY_BROKER_URL"])
        self.target = (url.hostname or "127.0.0.1", url.port or 6379)
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            self.port = s.getsockname()[1]
        self._lock = threading.Lock()
        self._open: set[socket.socket] = set()
        self._listener: socket.socket | None = None

    def up(self) -> None:
        listener = socket.socket()
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        listener.bind(("127.0.0.1", self.port))
        listener.listen(64)
        self._listener = listener
        threading.Thread(target=self._accept, args=(listener,), daemon=True).start()

    def down(self) -> None:
        if self._listener is not None:
            with contextlib.suppress(OSError):
                self._listener.shutdown(socket.SHUT_RDWR)
            self._listener.close()
            self._listener = None
        with self._lock:
            for s in self._open:
                with contextlib.suppress(OSError):
                    s.shutdown(socket.SHUT_RDWR)
                s.close()
            self._open.clear()

    def _accept(self, listener: socket.socket) -> None:
        while True:
            try:
                client, _ = listener.accept()
            except OSError:
                return
            try:
                upstream = socket.create_connection(self.target, timeout=5)
                upstream.settimeout(None)
            except OSError:
                client.close()
                continue
            with self._lock:
                self._open |= {client, upstream}
            for a, b in ((client, upstream), (upstream, client)):
                threading.Thread(target=self._pipe, args=(a, b), daemon=True).start()

    def _pipe(self, a: socket.socket, b: socket.socket) -> None:
        try:
            while data := a.recv(65536):
                b.sendall(data)
        except OSError:
            pass
        finally:
            for s in (a, b):
                with contextlib.suppress(OSError):
                    s.shutdown(socket.SHUT_RDWR)
