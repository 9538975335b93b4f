"""``manage.py bench_api [--clients 16] [--seconds 10] [--workers W]``: the API under gunicorn
against the fleet in the database (PostgreSQL; ``generate_fleet --recompute`` first), with
concurrent keep-alive clients on loopback, beside a bare DRF list of 50 rows served by the same
server (the floor). Prints p50/p95 latency and throughput per endpoint; a figure, not a test.

Endpoints: the findings list (first page), a stored CT report, "which circuits share this CT",
and a stored procedure checked now (the longest procedure of the sample sites). Run it with
``CACHE_URL`` set as in production (Redis) so the server's processes share the site documents
and verdicts they computed at a revision; without it each process keeps its own, and the
first check of each procedure in each process reads the site from the database.
"""

from __future__ import annotations

import http.client
import json
import os
import random
import signal
import statistics
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

from django.conf import settings
from django.contrib.auth import get_user_model
from django.contrib.auth.models import Group
from django.core.management.base import BaseCommand, CommandError
from django.db import connection
from rest_framework.authtoken.models import Token

from analysis import models as results
from inventory import models as inv


def _percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, round(q * (len(ordered) - 1)))]


def _load(
    port: int, token: str, requests: list[tuple[str, str]], clients: int, seconds: float
) -> dict[str, Any]:
    """``clients`` threads, each on its own keep-alive connection, cycling through
    ``requests`` (method, path) until ``seconds`` pass. Latencies in ms; bounded by time."""
    latencies: list[float] = []
    errors: list[str] = []
    lock = threading.Lock()
    deadline = time.perf_counter() + seconds
    headers = {"Authorization": f"Token {token}", "Content-Length": "0"}

    def client(seed: int) -> None:
        rng = random.Random(seed)
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
        mine: list[float] = []
        bad: list[str] = []
        while time.perf_counter() < deadline:
            method, path = rng.choice(requests)
            t0 = time.perf_counter()
            try:
                conn.request(method, path, headers=headers)
                response = conn.getresponse()
                response.read()
            except (OSError, http.client.HTTPException) as exc:
                bad.append(f"{path}: {exc}")
                conn.close()
                conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
                continue
            mine.append((time.perf_counter() - t0) * 1000)
            if response.status != 200:
                bad.append(f"{path}: HTTP {response.status}")
        conn.close()
        with lock:
            latencies.extend(mine)
            errors.extend(bad)

    t0 = time.perf_counter()
    threads = [threading.Thread(target=client, args=(i,)) for i in range(clients)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    took = time.perf_counter() - t0
    if not latencies:
        raise CommandError(f"no request answered: {errors[:3]}")
    return {
        "requests": len(latencies),
        "errors": len(errors),
        "first_error": errors[0] if errors else None,
        "throughput_rps": len(latencies) / took,
        "p50_ms": statistics.median(latencies),
        "p95_ms": _percentile(latencies, 0.95),
    }


class Command(BaseCommand):
    help = "Benchmark the API under gunicorn against the stored fleet (figures, not a test)."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--clients", type=int, default=16)
        parser.add_argument("--seconds", type=float, default=10.0)
        parser.add_argument("--workers", type=int, default=0, help="gunicorn workers (2×cores+1)")
        parser.add_argument("--port", type=int, default=8791)
        parser.add_argument("--sample-sites", type=int, default=20)
        parser.add_argument("--json", action="store_true", dest="as_json")

    def handle(self, *args, clients, seconds, workers, port, sample_sites, as_json, **options):
        if connection.vendor != "postgresql":
            self.stderr.write("warning: not PostgreSQL; the targets are stated for PostgreSQL")
        sites = list(inv.Site.objects.order_by("pk").values_list("pk", "code")[:sample_sites])
        if not sites or not results.SiteComputation.objects.exists():
            raise CommandError("no computed fleet: run `generate_fleet --sites N --recompute`")
        token = self._token()
        requests = self._requests([pk for pk, _ in sites], dict(sites))
        # One token drives every client: the per-user rate is lifted so the figures are the
        # server's, not the throttle's (its check still runs on every request).
        env = {
            **os.environ,
            "LOOPKEEP_BENCH_FLOOR": "1",
            "PYTHONUNBUFFERED": "1",
            "API_USER_RATE": "100000000/min",
        }
        cores = os.cpu_count() or 2
        cmd = [
            str(Path(sys.executable).with_name("gunicorn")),
            "-c",
            str(Path(settings.BASE_DIR) / "deploy" / "gunicorn.conf.py"),
            "--bind",
            f"127.0.0.1:{port}",
            "--workers",
            str(workers or 2 * cores + 1),
            "--access-logfile",
            "/dev/null",
            "config.wsgi",
        ]
        server = subprocess.Popen(
            cmd, cwd=settings.BASE_DIR, env=env, stdout=subprocess.DEVNULL, start_new_session=True
        )
        try:
            self._wait(port, token)
            figures: dict[str, Any] = {}
            floor = [("GET", "/api/v1/bench-floor/")]
            figures["floor: bare DRF list of 50 rows"] = _load(port, token, floor, clients, seconds)
            for name, reqs in requests.items():
                _load(port, token, reqs, clients, min(2.0, seconds))  # warm the workers
                figures[name] = _load(port, token, reqs, clients, seconds)
            figures["floor again"] = _load(port, token, floor, clients, seconds)
        finally:
            os.killpg(server.pid, signal.SIGTERM)
            server.wait(timeout=30)
        self._print(figures, as_json, clients, seconds)

    def _token(self) -> str:
        user, _ = get_user_model().objects.get_or_create(username="bench-api")
        user.groups.add(Group.objects.get(name="viewer"))
        return Token.objects.get_or_create(user=user)[0].key

    def _requests(self, site_ids: list[int], codes: dict[int, str]) -> dict[str, list]:
        cts = list(
            results.CTReport.objects.filter(site_id__in=site_ids).values_list("site_id", "ct")[:200]
        )
        verdicts = results.ProcedureVerdict.objects.filter(site_id__in=site_ids)
        longest = sorted(verdicts, key=lambda v: -len(v.verdict.get("steps", [])))[:10]
        v1 = "/api/v1"
        return {
            "findings list (50 rows)": [("GET", f"{v1}/findings/?page_size=50")],
            "CT report (stored)": [
                ("GET", f"{v1}/sites/{codes[s]}/cts/{ct}/report/") for s, ct in cts
            ],
            "CTs sharing a circuit": [
                ("GET", f"{v1}/sites/{codes[s]}/cts/{ct}/circuits/") for s, ct in cts
            ],
            "procedure check (computed now)": [
                ("POST", f"{v1}/sites/{codes[v.site_id]}/procedures/{v.procedure}/check/")
                for v in longest
            ],
        }

    def _wait(self, port: int, token: str) -> None:
        for _ in range(120):
            try:
                conn = http.client.HTTPConnection("127.0.0.1", port, timeout=2)
                conn.request(
                    "GET", "/api/v1/bench-floor/", headers={"Authorization": f"Token {token}"}
                )
                if conn.getresponse().status == 200:
                    return
            except OSError:
                pass
            time.sleep(0.5)
        raise CommandError("gunicorn did not answer within 60 s")

    def _print(self, figures: dict[str, Any], as_json: bool, clients: int, seconds: float) -> None:
        if as_json:
            self.stdout.write(json.dumps(figures, indent=2))
            return
        floor = figures["floor: bare DRF list of 50 rows"]
        self.stdout.write(f"{clients} clients, {seconds:g} s per endpoint, loopback")
        head = f"{'endpoint':34} {'req/s':>8} {'p50 ms':>8} {'p95 ms':>8}"
        self.stdout.write(f"{head} {'vs floor':>9} {'errors':>6}")
        for name, f in figures.items():
            ratio = f["throughput_rps"] / floor["throughput_rps"]
            self.stdout.write(
                f"{name:34} {f['throughput_rps']:8.0f} {f['p50_ms']:8.1f} {f['p95_ms']:8.1f} "
                f"{ratio:8.2f}x {f['errors']:6d}"
            )
