"""The read-replica router (config/routers.py) with a second PostgreSQL database on the same
server standing in for the replica (the ``replica`` alias of the test settings, its own test
database, not a mirror): the API's reads are answered from it, writes and everything after a
write stay on the primary, and nothing outside an API read ever reads it."""

from __future__ import annotations

import pytest
from django.contrib.auth import get_user_model
from django.contrib.auth.models import Group
from django.db import router, transaction
from django.http import HttpResponse
from django.test import RequestFactory
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient

from config.middleware import RequestContextMiddleware
from config.routers import replica_reads
from inventory import models as inv
from inventory.services import site_import
from tests.deploy.conftest import token_user
from tests.inventory.docs import small_site

BOTH = ["default", "replica"]


def _copy_login_to_replica(user, token) -> None:
    """What replication would have done: the account and its token exist on the replica."""
    User = get_user_model()
    User.objects.using("replica").bulk_create([User(**{
        f.attname: getattr(user, f.attname) for f in User._meta.concrete_fields
    })])  # fmt: skip
    for group in user.groups.all():
        copy, _ = Group.objects.using("replica").get_or_create(name=group.name)
        User.groups.through.objects.using("replica").create(user_id=user.pk, group_id=copy.pk)
    Token.objects.using("replica").create(key=token.key, user_id=user.pk)


@pytest.fixture
def client_on_both(db) -> APIClient:
    user, token = token_user()
    _copy_login_to_replica(user, token)
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {token.key}")
    return client


def _site_codes(client: APIClient) -> list[str]:
    response = client.get("/api/v1/sites/")
    assert response.status_code == 200, response.content
    return sorted(row["code"] for row in response.json())


@pytest.mark.postgres
@pytest.mark.django_db(databases=BOTH)
def test_api_reads_come_from_the_replica_and_writes_go_to_the_primary(client_on_both, settings):
    site_import(doc=small_site("PRI"))  # on the primary only
    inv.Site(code="RPL", name="only on the replica").save(using="replica")
    assert _site_codes(client_on_both) == ["PRI"]  # replica reads off: the primary answers

    settings.LOOPKEEP_REPLICA_READS = True
    assert _site_codes(client_on_both) == ["RPL"]  # a GET under /api/ reads the replica
    # A write request runs on the primary throughout: its CT exists only there.
    response = client_on_both.post(
        "/api/v1/sites/PRI/cts/CB-1-A/tap-change/", {"in_use": ["X1", "X5"]}, format="json"
    )
    assert response.status_code == 200, response.content
    assert inv.TapChange.objects.using("default").count() == 1
    assert inv.TapChange.objects.using("replica").count() == 0
    assert inv.Site.objects.using("replica").get().code == "RPL"  # nothing written there


@pytest.mark.postgres
@pytest.mark.django_db(databases=BOTH)
def test_a_request_reads_the_primary_after_it_writes(settings):
    settings.LOOPKEEP_REPLICA_READS = True
    seen: list[str] = []

    def view(request):
        seen.append(router.db_for_read(inv.Site))
        with transaction.atomic():
            seen.append(router.db_for_read(inv.Site))  # a transaction reads what it writes
            inv.Site.objects.get_or_create(code="NEW", defaults={"name": "written by the request"})
        seen.append(router.db_for_read(inv.Site))  # pinned: reads its own write
        seen.append(inv.Site.objects.filter(code="NEW").db)
        return HttpResponse(str(inv.Site.objects.filter(code="NEW").count()))

    middleware = RequestContextMiddleware(view)
    response = middleware(RequestFactory().get("/api/v1/sites/"))
    assert seen == ["replica", "default", "default", "default"]
    assert response.content == b"1"
    # The pin ends with the request: the next one reads the replica again.
    middleware(RequestFactory().get("/api/v1/sites/"))
    assert seen[4] == "replica"
    assert inv.Site.objects.using("replica").filter(code="NEW").count() == 0


@pytest.mark.postgres
@pytest.mark.django_db(databases=BOTH)
def test_only_api_reads_of_safe_methods_use_the_replica(settings):
    settings.LOOPKEEP_REPLICA_READS = True
    assert router.db_for_read(inv.Site) == "default"  # no request: workers, commands
    seen: list[str] = []

    def view(request):
        seen.append(router.db_for_read(inv.Site))
        return HttpResponse("")

    middleware = RequestContextMiddleware(view)
    factory = RequestFactory()
    middleware(factory.post("/api/v1/sites/import/"))
    middleware(factory.get("/admin/"))
    middleware(factory.get("/api/v1/sites/"))
    assert seen == ["default", "default", "replica"]
    with replica_reads():
        obj = inv.Site.objects.using("replica").create(code="R2", name="replica row")
        # Saving an object read from the replica goes to the primary, never back to it.
        assert router.db_for_write(inv.Site, instance=obj) == "default"
    settings.LOOPKEEP_REPLICA_READS = False
    with replica_reads():
        assert router.db_for_read(inv.Site) == "default"
