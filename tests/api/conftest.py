"""API test fixtures: the invented demo sites, imported with their results computed in-process,
and one client per role."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from django.contrib.auth import get_user_model
from django.contrib.auth.models import Group
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient

from inventory.services import site_import

DEMO = Path(__file__).resolve().parents[2] / "fixtures" / "demo"


def demo_doc(name: str = "quillfen") -> dict:
    return json.loads((DEMO / f"{name}.json").read_text())


@pytest.fixture(autouse=True)
def _jobs_in_process(eager) -> None:
    """Every test here runs its jobs in-process (tests/conftest.py: ``eager``)."""


@pytest.fixture
def demo(db, django_capture_on_commit_callbacks):
    """Both demo sites, stored, with fresh results."""
    with django_capture_on_commit_callbacks(execute=True):
        site_import(doc=demo_doc("quillfen"))
    with django_capture_on_commit_callbacks(execute=True):
        site_import(doc=demo_doc("orrinvale"))


def _client(role: str | None) -> APIClient:
    user = get_user_model().objects.create_user(username=f"u-{role}", password="x")
    if role:
        user.groups.add(Group.objects.get(name=role))
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=user).key}")
    return client


@pytest.fixture
def viewer(db) -> APIClient:
    return _client("viewer")


@pytest.fixture
def editor(db) -> APIClient:
    return _client("editor")


@pytest.fixture
def no_role(db) -> APIClient:
    return _client(None)
