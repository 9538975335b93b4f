"""Who sees what on the planner pages: the API's roles (api/roles.py). Anonymous visitors get
the login page and nothing else, a user with no role gets a refusal, a viewer reads and runs
checks and plans, and only an editor writes. Every form carries a CSRF token."""

from __future__ import annotations

import pytest
from django.test import Client

from inventory import models as inv
from tests.pages.conftest import make_user

pytestmark = pytest.mark.django_db

PAGES = [
    "/",
    "/?q=R-132",
    "/sites/QFN/",
    "/sites/QFN/cts/CB-131-A/",
    "/sites/QFN/cts/CB-131-A/plot/burden.svg",
    "/sites/QFN/devices/R-132/",
    "/sites/QFN/devices/R-132/worksheet.pdf",
    "/sites/QFN/procedures/P-R132-OUT/",
    "/sites/QFN/procedures/P-R132-OUT/worksheet.pdf",
    "/sites/QFN/procedures/P-R132-OUT/builder/",
    "/sites/QFN/builder/",
]


def test_anonymous_visitors_are_sent_to_the_login_page(demo, client):
    for url in PAGES:
        response = client.get(url)
        assert response.status_code == 302, url
        assert response["Location"].startswith("/login/?next="), url
        # and nothing of the record is in the answer
        assert b"QFN" not in response.content, url


def test_anonymous_posts_write_nothing(demo, client):
    before = inv.Procedure.objects.count()
    response = client.post("/sites/QFN/devices/R-132/save-plan/", {"code": "P-X", "title": "t"})
    assert response.status_code == 302 and response["Location"].startswith("/login/")
    response = client.post("/sites/QFN/builder/", {"code": "P-X", "action": "save"})
    assert response.status_code == 302
    assert inv.Procedure.objects.count() == before


def test_a_user_without_a_role_sees_no_data(demo, no_role):
    for url in PAGES:
        response = no_role.get(url)
        assert response.status_code == 403, url
        assert b"has no role" in response.content
        assert b"R-132" not in response.content


def test_a_viewer_reads_every_page(demo, viewer):
    for url in PAGES:
        if url.endswith(".pdf"):
            continue  # tests/pages/test_worksheets.py
        response = viewer.get(url)
        assert response.status_code == (302 if "?q=" in url else 200), url


def test_login_page_logs_in_and_carries_a_csrf_token(demo):
    make_user("viewer", username="planner", password="a-long-test-password")
    browser = Client(enforce_csrf_checks=True)
    page = browser.get("/login/")
    assert page.status_code == 200
    assert b'name="csrfmiddlewaretoken"' in page.content
    token = page.cookies["csrftoken"].value
    # without the token the login is refused (CSRF), with it the user lands on the home page
    refused = browser.post("/login/", {"username": "planner", "password": "a-long-test-password"})
    assert refused.status_code == 403
    done = browser.post(
        "/login/",
        {"username": "planner", "password": "a-long-test-password", "csrfmiddlewaretoken": token},
    )
    assert done.status_code == 302 and done["Location"] == "/"
    assert b"Quillfen" in browser.get("/").content


def test_every_form_carries_a_csrf_token(demo, editor):
    for url in ("/sites/QFN/builder/", "/sites/QFN/devices/R-132/", "/sites/QFN/"):
        html = editor.get(url).content.decode()
        posts = html.count('method="post"')
        assert posts >= 1
        assert html.count('name="csrfmiddlewaretoken"') >= posts, url


def test_a_post_without_the_csrf_token_is_refused(demo):
    user = make_user("editor", username="ed")
    browser = Client(enforce_csrf_checks=True)
    browser.force_login(user)
    response = browser.post("/sites/QFN/devices/R-132/save-plan/", {"code": "P-Y", "title": "t"})
    assert response.status_code == 403
    assert not inv.Procedure.objects.filter(code="P-Y").exists()


def test_a_viewer_checks_drafts_but_cannot_save(demo, viewer):
    response = viewer.post(
        "/sites/QFN/builder/",
        {
            "code": "P-NEW",
            "title": "t",
            "op": "set",
            "switch": "TS-132/T1",
            "position": "open",
            "action": "add",
        },
    )
    assert response.status_code == 200
    assert "set TS-132/T1 to open" in response.content.decode()
    saved = viewer.post(
        "/sites/QFN/builder/",
        {
            "code": "P-NEW",
            "title": "t",
            "step": '{"set":"TS-132/T1","to":"open"}',
            "action": "save",
        },
    )
    assert "needs the editor role" in saved.content.decode()
    assert not inv.Procedure.objects.filter(code="P-NEW").exists()
    refused = viewer.post("/sites/QFN/devices/R-132/save-plan/", {"code": "P-Z", "title": "t"})
    assert refused.status_code == 403
    assert not inv.Procedure.objects.filter(code="P-Z").exists()
