"""Issue 11, item 5: two first imports of the same new site at once both succeed, one after the
other (``site_import`` takes a transaction-scoped advisory lock on the site code), and both
tap-change histories are kept. Two threads, two database connections, on PostgreSQL (SQLite
serialises writers anyway and has no row locks to race)."""

from __future__ import annotations

import threading

import pytest
from django.db import connections

from inventory import models
from inventory.services import site_import
from tests.inventory.docs import small_site


def _with_history(ct: int, at: str, reason: str) -> dict:
    doc = small_site("NEW-1")
    doc["cts"][ct]["tap_changes"] = [
        {"from": ["X1", "X5"], "to": ["X1", "X4"], "at": at, "reason": reason}
    ]
    return doc


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_two_first_imports_of_a_new_site_at_once_both_succeed():
    docs = [
        _with_history(0, "2022-02-01T10:00:00Z", "WO-A"),
        _with_history(1, "2022-03-01T10:00:00Z", "WO-B"),
    ]
    start = threading.Barrier(len(docs))
    failures: list[BaseException] = []

    def run(doc: dict) -> None:
        try:
            start.wait(timeout=30)
            site_import(doc=doc)
        except BaseException as exc:  # reported below, in the test's thread
            failures.append(exc)
        finally:
            connections.close_all()

    threads = [threading.Thread(target=run, args=(doc,)) for doc in docs]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=120)
    assert not failures, failures
    assert models.Site.objects.filter(code="NEW-1").count() == 1
    kept = set(models.TapChange.objects.values_list("ct__code", "reason"))
    assert kept == {("CB-1-A", "WO-A"), ("CB-1-B", "WO-B")}
