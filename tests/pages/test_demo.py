"""`make demo` opens on the home page with the demo sites: after `load_demo` (the command
`make demo` runs), "/" shows both invented sites to a signed-in user."""

from __future__ import annotations

import io

import pytest
from django.core.management import call_command

pytestmark = pytest.mark.django_db


def test_home_page_after_load_demo(viewer, client, django_capture_on_commit_callbacks):
    assert client.get("/")["Location"] == "/login/?next=/"  # anonymous: the login page
    with django_capture_on_commit_callbacks(execute=True):
        call_command("load_demo", stdout=io.StringIO())
    page = viewer.get("/")
    assert page.status_code == 200
    html = page.content.decode()
    for code, name in (("QFN", "Quillfen 115/13.8 kV"), ("ORV", "Orrinvale 66/11 kV")):
        assert f'href="/sites/{code}/"' in html and name in html
    assert "not computed yet" not in html  # the demo's results were computed on load
