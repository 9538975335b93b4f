"""The deploy/ files agree with the settings: every setting read from the environment is
explained in the environment example, and the units and the compose file consume the queues
the task routes send to (config/settings/base.py)."""

from __future__ import annotations

import re
from pathlib import Path

import yaml
from django.conf import settings

ROOT = Path(__file__).resolve().parents[2]
DEPLOY = ROOT / "deploy"
READ = re.compile(
    r"""(?:os\.environ(?:\.get)?[(\[]|env_(?:bool|list)\(|env\.get\()"([A-Z0-9_]+)\""""
)
NOT_FOR_OPERATORS = {"LOOPKEEP_BENCH_FLOOR"}  # benchmarks only


def _settings_read() -> set[str]:
    names: set[str] = set()
    for path in [*(ROOT / "config").rglob("*.py"), DEPLOY / "gunicorn.conf.py"]:
        names |= set(READ.findall(path.read_text()))
    return names - NOT_FOR_OPERATORS


def test_every_setting_is_explained_in_the_environment_example():
    example = (DEPLOY / "loopkeep.env.example").read_text()
    explained = set(re.findall(r"^#?([A-Z0-9_]+)=", example, flags=re.M))
    read = _settings_read()
    assert {"DATABASE_POOL", "DATABASE_REPLICA_URL", "LOG_FORMAT"} <= read  # the scan works
    assert read - explained == set()
    for name in read:  # each with a comment line just above it or its group
        line = next(
            i
            for i, row in enumerate(example.splitlines())
            if row.lstrip("#").startswith(f"{name}=")
        )
        assert example.splitlines()[line - 1].startswith("#"), name


def test_worker_units_and_compose_consume_every_routed_queue():
    routed = {r["queue"] for r in settings.CELERY_TASK_ROUTES.values()}
    assert routed == {q.name for q in settings.CELERY_TASK_QUEUES}
    unit = (DEPLOY / "systemd" / "loopkeep-worker@.service").read_text()
    assert "-Q ${LOOPKEEP_QUEUES}" in unit and "Environment=LOOPKEEP_QUEUES=%i" in unit
    assert "LOOPKEEP_QUEUES=imports,default" in unit  # documented instance settings
    assert "LOOPKEEP_QUEUES=fleet,recompute" in unit
    target = (DEPLOY / "systemd" / "loopkeep.target").read_text()
    for instance in ("recompute", "fleet", "imports"):
        assert f"loopkeep-worker@{instance}.service" in target
    compose = yaml.safe_load((DEPLOY / "docker-compose.yml").read_text())
    consumed: set[str] = set()
    for service in compose["services"].values():
        command = service.get("command") or []
        if "worker" in command:
            consumed |= set(command[command.index("-Q") + 1].split(","))
    assert consumed == routed


def test_nginx_example_limits_bodies_above_the_api_limit_and_serves_static_files():
    conf = (DEPLOY / "nginx" / "loopkeep.conf").read_text()
    limit_mb = int(re.search(r"client_max_body_size (\d+)m;", conf).group(1))
    assert limit_mb * 1024 * 1024 > settings.DATA_UPLOAD_MAX_MEMORY_SIZE
    assert "ssl_certificate " in conf and "return 301 https://" in conf
    assert "location /static/" in conf and "X-Forwarded-Proto $scheme" in conf
