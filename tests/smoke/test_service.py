"""The whole service on loopback: gunicorn (deploy/gunicorn.conf.py, production settings, the
native psycopg pool, JSON logs), two Celery workers and beat, against this machine's PostgreSQL
(the test database) and Redis (``CELERY_BROKER_URL``, under a key prefix of its own so nothing
else on that Redis database is touched). Every process is started here and stopped by its PID.

Through the API: a user's token, a demo site imported, a tap changed, fresh results and findings
seen within a bound; then a fleet run with one worker stopped (SIGTERM, a warm shutdown) part
way, finished by the other. Bounds are generous (a loaded 2-core machine): they catch a service
that never converges, they do not time it (``bench_edit_latency`` does).
"""

from __future__ import annotations

import contextlib
import json
import os
import secrets
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from django.db import connection

from analysis import services
from analysis.models import AnalysisRun, RunKind, RunStatus
from fixtures.fleet import generate_site
from inventory.services import site_import
from tests.deploy.conftest import token_user

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "fixtures" / "demo" / "quillfen.json"
START_S = 90.0  # processes up and /ready/ green
RESULTS_S = 60.0  # an edit's fresh results
FLEET_SITES = 24  # enough chunks that worker B has some left when worker A leaves

pytestmark = [pytest.mark.postgres, pytest.mark.broker]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def wait_for(check: Callable[[], Any], what: str, timeout_s: float, every_s: float = 0.2) -> Any:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = check()
        if value:
            return value
        time.sleep(every_s)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


class Service:
    """The processes, their environment and log files; stopped by PID at the end."""

    def __init__(self, tmp: Path) -> None:
        db = connection.settings_dict
        auth = db["USER"] + (f":{db['PASSWORD']}" if db.get("PASSWORD") else "")
        self.port = free_port()
        self.tmp = tmp
        self.env = {
            **{k: v for k, v in os.environ.items() if not k.startswith(("DJANGO_", "GUNICORN_"))},
            "DJANGO_SETTINGS_MODULE": "config.settings.production",
            "SECRET_KEY": secrets.token_urlsafe(48),
            "ALLOWED_HOSTS": "127.0.0.1,localhost",
            "SECURE_SSL_REDIRECT": "0",
            "DATABASE_URL": f"postgres://{auth}@{db['HOST'] or '127.0.0.1'}:{db['PORT'] or 5432}"
            f"/{db['NAME']}",
            "DATABASE_POOL": "native",
            "DATABASE_POOL_MIN_SIZE": "1",
            "DATABASE_POOL_MAX_SIZE": "4",
            "CELERY_BROKER_KEY_PREFIX": f"smoke-{secrets.token_hex(4)}:",
            "LOOPKEEP_RECOMPUTE_CHUNK_SITES": "1",
            "LOOPKEEP_VAR_DIR": str(tmp),
            "LOG_FORMAT": "json",
            "LOOPKEEP_BIND": f"127.0.0.1:{self.port}",
            "GUNICORN_WORKERS": "2",
        }
        self.procs: dict[str, subprocess.Popen] = {}

    def start(self, name: str, *argv: str) -> subprocess.Popen:
        log = (self.tmp / f"{name}.log").open("wb")
        proc = subprocess.Popen(
            [sys.executable, "-m", *argv], cwd=ROOT, env=self.env, stdout=log, stderr=log
        )
        self.procs[name] = proc
        return proc

    def worker(self, name: str) -> subprocess.Popen:
        return self.start(
            name, "celery", "-A", "config", "worker", "-n", f"{name}@%h", "-Q",
            "recompute,fleet,imports,default", "--concurrency=1", "--prefetch-multiplier=1",
            "-O", "fair", "--without-mingle", "--without-gossip", "--loglevel=INFO",
        )  # fmt: skip

    def stop(self, name: str, sig: int = signal.SIGTERM, timeout_s: float = 60.0) -> int:
        proc = self.procs[name]
        if proc.poll() is None:
            proc.send_signal(sig)
            try:
                proc.wait(timeout_s)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait(10)
        return proc.returncode

    def stop_all(self) -> None:
        for name in list(self.procs):
            self.stop(name, timeout_s=30.0)

    def log_lines(self, name: str) -> list[dict]:
        out = []
        for line in (self.tmp / f"{name}.log").read_text(errors="replace").splitlines():
            with contextlib.suppress(ValueError):
                row = json.loads(line)
                if isinstance(row, dict):
                    out.append(row)
        return out

    def logs_tail(self) -> str:
        return "\n".join(
            f"--- {name}\n" + (self.tmp / f"{name}.log").read_text(errors="replace")[-3000:]
            for name in self.procs
        )

    def request(self, method: str, path: str, token: str = "", body: Any = None) -> tuple[int, Any]:
        data = None if body is None else json.dumps(body).encode()
        req = urllib.request.Request(
            f"http://127.0.0.1:{self.port}{path}", data=data, method=method
        )
        req.add_header("Content-Type", "application/json")
        if token:
            req.add_header("Authorization", f"Token {token}")
        try:
            with urllib.request.urlopen(req, timeout=30) as response:
                return response.status, json.loads(response.read() or b"null")
        except urllib.error.HTTPError as exc:
            return exc.code, json.loads(exc.read() or b"null")
        except (urllib.error.URLError, ConnectionError):
            return 0, None


@pytest.fixture
def service(tmp_path: Path) -> Iterator[Service]:
    svc = Service(tmp_path)
    try:
        yield svc
    finally:
        svc.stop_all()
        connection.close()


@pytest.mark.django_db(transaction=True)
def test_service_on_loopback_edits_converge_and_a_stopped_worker_loses_nothing(service):
    service.start("web", "gunicorn", "-c", "deploy/gunicorn.conf.py", "config.wsgi")
    service.worker("worker-a")
    service.worker("worker-b")
    service.start("beat", "celery", "-A", "config", "beat", "--loglevel=INFO",
                  "-s", str(service.tmp / "beat-schedule"))  # fmt: skip
    try:
        wait_for(lambda: service.request("GET", "/health/")[0] == 200, "/health/", START_S)

        def hosts(body: dict) -> set[str]:
            return {w["hostname"].split("@")[0] for w in body["checks"]["workers"]["workers"]}

        # Ready once one worker serves every queue; the test also waits for the second one.
        wait_for(
            lambda: (
                (r := service.request("GET", "/ready/"))[0] == 200
                and hosts(r[1]) == {"worker-a", "worker-b"}
            ),
            "/ready/ with both workers",
            START_S,
        )

        _, token = token_user(role="editor", name="smoke")
        status, body = service.request(
            "POST", "/api/v1/sites/import/", token.key, json.loads(DEMO.read_text())
        )
        assert status in (200, 201), body
        site = wait_for(
            lambda: (
                (r := service.request("GET", "/api/v1/sites/QFN/", token.key)[1])
                and r.get("stale") is False
                and r
            ),
            "results of the imported demo site",
            RESULTS_S,
        )

        # The tap change: CB-131-A from X1-X5 to X1-X4, 1200:5 to 800:5 (the demo file's
        # nameplate: X1 0, X4 800, X5 1200 primary amperes).
        status, body = service.request(
            "POST",
            "/api/v1/sites/QFN/cts/CB-131-A/tap-change/",
            token.key,
            {"in_use": ["X1", "X4"], "reason": "smoke test"},
        )
        assert status == 200, body
        after = wait_for(
            lambda: (
                (r := service.request("GET", "/api/v1/sites/QFN/", token.key)[1])
                and r["revision"] > site["revision"]
                and r["stale"] is False
                and r
            ),
            "results of the tap change",
            RESULTS_S,
        )
        assert after["computed_revision"] == after["revision"]
        status, report = service.request("GET", "/api/v1/sites/QFN/cts/CB-131-A/report/", token.key)
        assert status == 200 and report["stale"] is False
        assert report["ratio"] == "800:5", report
        status, findings = service.request(
            "GET", "/api/v1/findings/?site=QFN&page_size=500", token.key
        )
        assert status == 200 and len(findings["results"]) == after["findings"] > 0
        assert all(f["stale"] is False for f in findings["results"])

        # A fleet run, one site per chunk; worker A is stopped once the run is under way.
        with services.recompute_deferred():
            for index in range(FLEET_SITES):
                site_import(doc=generate_site(index, seed=3))
        subprocess.run(
            [sys.executable, "manage.py", "recompute"],
            cwd=ROOT, env=service.env, check=True, capture_output=True, timeout=60,
        )  # fmt: skip
        run = AnalysisRun.objects.filter(kind=RunKind.FLEET).latest("pk")
        total = FLEET_SITES + 1
        wait_for(
            lambda: AnalysisRun.objects.get(pk=run.pk).sites_done >= 1,
            "the fleet run's first site",
            RESULTS_S,
            every_s=0.05,
        )
        # Counted when worker A is told to leave: it ends the chunk in hand (at most one site,
        # one site per chunk), and every other site left must be done by worker B.
        done_when_a_left = AnalysisRun.objects.get(pk=run.pk).sites_done
        assert done_when_a_left <= total - 2, "the run was nearly over: nothing to hand over"
        assert service.stop("worker-a") == 0  # a warm shutdown: its task ends, then it exits
        wait_for(
            lambda: AnalysisRun.objects.get(pk=run.pk).status == RunStatus.SUCCESS,
            "the fleet run finished by worker B",
            RESULTS_S * 2,
        )
        run.refresh_from_db()
        assert (run.sites_done, run.sites_total, run.sites_failed) == (total, total, 0)
        # Worker B's own JSON log lines: the chunks it finished for this run, by run id.
        by_b = [
            row
            for row in service.log_lines("worker-b")
            if row.get("run_id") == run.pk and "succeeded" in row.get("message", "")
        ]
        assert len(by_b) >= total - done_when_a_left - 1
        status, sites = service.request("GET", "/api/v1/sites/", token.key)
        assert status == 200 and len(sites) == total and not any(s["stale"] for s in sites)
        # The web's JSON access lines carry the request id and the user.
        access = [r for r in service.log_lines("web") if r.get("logger") == "loopkeep.request"]
        assert any(r["user"] == "smoke" and r["site"] == "QFN" and r["request_id"] for r in access)
    except BaseException:
        print(service.logs_tail())
        raise
