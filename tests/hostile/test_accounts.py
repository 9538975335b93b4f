"""Issue 11, item 7: the demo account exists only in the embedded SQLite demo database and
cannot log in unless DEBUG is on; production refuses to start with it present or with a
placeholder or short secret key, and ``check --deploy`` reports it; login attempts are
throttled (django-axes)."""

from __future__ import annotations

import pytest
from django.contrib.auth import authenticate, get_user_model
from django.core import checks
from django.core.exceptions import ImproperlyConfigured
from django.core.management import call_command
from django.db import connection
from django.test import RequestFactory, override_settings

from config.accounts import DEMO_USERNAME, demo_account_allowed, refuse_unsafe_start
from config.secret_key import secret_key_problem
from tests.test_settings import run_manage

GOOD_KEY = "k7#Qz!9vLw2@pR5xT8mN3bV6cY1dF4gH0jK&sA*eU-iO+lP=qW"


def _request():
    return RequestFactory().post("/admin/login/", REMOTE_ADDR="203.0.113.7")


@pytest.mark.django_db
def test_load_demo_without_debug_creates_no_account(capsys):
    call_command("load_demo")
    assert not get_user_model().objects.filter(username=DEMO_USERNAME).exists()
    assert "no demo login created" in capsys.readouterr().out


@pytest.mark.django_db
def test_load_demo_with_debug_creates_it_only_in_the_embedded_sqlite_database():
    with override_settings(DEBUG=True):
        call_command("load_demo")
    exists = get_user_model().objects.filter(username=DEMO_USERNAME).exists()
    assert exists == (connection.vendor == "sqlite")


@pytest.mark.django_db
def test_demo_account_is_allowed_only_with_debug_on_sqlite():
    with override_settings(DEBUG=False):
        assert not demo_account_allowed()
    with override_settings(DEBUG=True):
        assert demo_account_allowed() == (connection.vendor == "sqlite")


@pytest.mark.django_db
def test_the_demo_account_cannot_log_in_unless_debug_is_on():
    get_user_model().objects.create_superuser(DEMO_USERNAME, "demo@example.invalid", "demo")
    get_user_model().objects.create_user("clerk", "c@example.invalid", "clerk-password")
    with override_settings(DEBUG=False):
        assert authenticate(_request(), username=DEMO_USERNAME, password="demo") is None
        assert authenticate(_request(), username="clerk", password="clerk-password") is not None
    with override_settings(DEBUG=True):
        user = authenticate(_request(), username=DEMO_USERNAME, password="demo")
        assert user is not None and user.username == DEMO_USERNAME


@pytest.mark.django_db
def test_the_service_refuses_to_start_while_the_demo_account_exists():
    with override_settings(DEBUG=False):
        refuse_unsafe_start()  # no demo account: starts
        get_user_model().objects.create_user(DEMO_USERNAME, "d@example.invalid", "demo")
        with pytest.raises(ImproperlyConfigured, match="demo account"):
            refuse_unsafe_start()
    with override_settings(DEBUG=True):
        refuse_unsafe_start()  # the demo machine


@pytest.mark.parametrize(
    ("key", "problem"),
    [
        ("", "must be set"),
        ("replace-with-a-long-random-secret", "placeholder"),
        ("loopkeep-local-development-only-not-secret", "placeholder"),
        ("django-insecure-" + "x" * 60, "placeholder"),
        ("short-but-random-Zq8#", "too short"),
        ("a" * 80, "too short or too plain"),
        (GOOD_KEY, None),
    ],
)
def test_secret_key_rules(key, problem):
    found = secret_key_problem(key)
    assert (found is None) if problem is None else (problem in found)


@pytest.mark.parametrize(("key", "starts"), [("too-short", False), (GOOD_KEY, True)])
def test_production_settings_refuse_to_load_with_a_bad_key(key, starts):
    result = run_manage(
        "check",
        DJANGO_SETTINGS_MODULE="config.settings.production",
        SECRET_KEY=key,
        ALLOWED_HOSTS="loopkeep.example.invalid",
    )
    assert (result.returncode == 0) == starts, result.stderr[-500:]
    if not starts:
        assert "SECRET_KEY is too short" in result.stderr


@pytest.mark.django_db
def test_login_attempts_are_throttled(client):
    """django-axes: after LOGIN_FAILURE_LIMIT (5) wrong passwords, even the right one is
    refused for that username from that address (HTTP 429) until the cool-off."""
    get_user_model().objects.create_superuser("clerk", "c@example.invalid", "right-password")
    statuses = [
        client.post(
            "/admin/login/?next=/admin/", {"username": "clerk", "password": "wrong"}
        ).status_code
        for _ in range(5)
    ]
    assert statuses == [200, 200, 200, 200, 429]  # the form again with its error, then locked
    response = client.post(
        "/admin/login/?next=/admin/", {"username": "clerk", "password": "right-password"}
    )
    assert response.status_code == 429
    assert "_auth_user_id" not in client.session


@pytest.mark.django_db
def test_check_deploy_reports_the_demo_account_with_debug_off():
    """Common practice, no source: a shared default login must not reach production. Django's
    system-check framework runs deploy-tagged checks only under ``check --deploy``."""

    def demo_errors(**kwargs):
        found = checks.run_checks(include_deployment_checks=True, **kwargs)
        return [m for m in found if m.id == "loopkeep.E001"]

    with override_settings(DEBUG=False):
        assert demo_errors() == []  # no demo account
        get_user_model().objects.create_user(DEMO_USERNAME, "d@example.invalid", "demo")
        (error,) = demo_errors()
        assert error.level == checks.ERROR and error.is_serious()
        assert "demo account 'demo'" in error.msg and "DEBUG is off" in error.msg
        assert "delete()" in error.hint
        # Deploy-only: a plain `check` (and every command's startup check) leaves it alone.
        assert [m for m in checks.run_checks() if m.id == "loopkeep.E001"] == []
    with override_settings(DEBUG=True):
        assert demo_errors() == []  # the demo machine
