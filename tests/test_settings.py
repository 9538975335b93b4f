"""Settings from the environment: production has no default secret and passes
``check --deploy`` with no warnings once given a real one."""

from __future__ import annotations

import os
import secrets
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def run_manage(*args: str, **env: str) -> subprocess.CompletedProcess:
    environment = {k: v for k, v in os.environ.items() if k not in {"SECRET_KEY", "DEBUG"}}
    environment.update(env)
    return subprocess.run(
        [sys.executable, "manage.py", *args],
        cwd=ROOT,
        env=environment,
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )


def test_production_refuses_to_start_without_a_secret():
    result = run_manage("check", DJANGO_SETTINGS_MODULE="config.settings.production")
    assert result.returncode != 0
    assert "SECRET_KEY must be set in production" in result.stderr


def test_production_passes_check_deploy_with_a_real_secret():
    result = run_manage(
        "check",
        "--deploy",
        "--fail-level",
        "WARNING",
        DJANGO_SETTINGS_MODULE="config.settings.production",
        SECRET_KEY=secrets.token_urlsafe(64),
        ALLOWED_HOSTS="loopkeep.example.invalid",
    )
    assert result.returncode == 0, result.stderr
    assert "System check identified no issues (0 silenced)." in result.stdout


def test_embedded_default_is_sqlite_with_in_process_jobs():
    probe = (
        "from django.conf import settings as s; "
        "print(s.DATABASES['default']['ENGINE'], s.CELERY_TASK_ALWAYS_EAGER)"
    )
    plain = {k: v for k, v in os.environ.items() if k not in {"DATABASE_URL", "CELERY_BROKER_URL"}}
    result = subprocess.run(
        [sys.executable, "manage.py", "shell", "--no-imports", "-c", probe],
        cwd=ROOT,
        env=plain,
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert result.stdout.split() == ["django.db.backends.sqlite3", "True"], result.stderr
    configured = run_manage(
        "shell",
        "--no-imports",
        "-c",
        probe,
        DATABASE_URL="postgres://u@127.0.0.1:1/x",
        CELERY_BROKER_URL="redis://127.0.0.1:6379/15",
    )
    assert configured.stdout.split() == ["django.db.backends.postgresql", "False"], (
        configured.stderr
    )
