"""An API client with a token, for the deployment tests."""

from __future__ import annotations

import pytest
from django.contrib.auth import get_user_model
from django.contrib.auth.models import Group
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient


def token_user(role: str = "editor", name: str = "operator"):
    user = get_user_model().objects.create_user(username=name, password="x")
    user.groups.add(Group.objects.get_or_create(name=role)[0])
    return user, Token.objects.create(user=user)


@pytest.fixture
def editor_client(db) -> APIClient:
    _, token = token_user()
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {token.key}")
    return client
