"""Planner-page fixtures: the invented demo sites with their results computed in-process, and
a signed-in browser client per role."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from django.contrib.auth import get_user_model
from django.contrib.auth.models import Group
from django.test import Client

from analysis import actions
from inventory.services import site_import

DEMO = Path(__file__).resolve().parents[2] / "fixtures" / "demo"


def demo_doc(name: str) -> dict:
    return json.loads((DEMO / f"{name}.json").read_text())


@pytest.fixture(autouse=True)
def fresh_netlists():
    """Forget the netlists kept per thread by ``analysis.actions.site_netlist``: they are keyed
    by (site id, revision), and on SQLite a rolled-back test leaves both free for the next test
    to reuse with another record."""
    actions._local.__dict__.pop("sites", None)
    yield
    actions._local.__dict__.pop("sites", None)


@pytest.fixture(autouse=True)
def _jobs_in_process(eager) -> None:
    """Every test here runs its jobs in-process (tests/conftest.py: ``eager``)."""


def load(capture, *names: str) -> None:
    for name in names:
        with capture(execute=True):
            site_import(doc=demo_doc(name))


@pytest.fixture
def demo(db, django_capture_on_commit_callbacks):
    """The Quillfen demo site (QFN), stored, with fresh results."""
    load(django_capture_on_commit_callbacks, "quillfen")


@pytest.fixture
def demo_both(db, django_capture_on_commit_callbacks):
    """Both demo sites, stored, with fresh results."""
    load(django_capture_on_commit_callbacks, "quillfen", "orrinvale")


def make_user(role: str | None, username: str | None = None, password: str = "pw-for-tests"):
    user = get_user_model().objects.create_user(
        username=username or f"page-{role}", password=password
    )
    if role:
        # the roles' groups come from a migration; a transactional test before this one may
        # have flushed them, so they are made again when missing (api/roles.py names them)
        user.groups.add(Group.objects.get_or_create(name=role)[0])
    return user


def _client(role: str | None) -> Client:
    client = Client()
    client.force_login(make_user(role))
    return client


@pytest.fixture
def viewer(db) -> Client:
    return _client("viewer")


@pytest.fixture
def editor(db) -> Client:
    return _client("editor")


@pytest.fixture
def no_role(db) -> Client:
    return _client(None)
