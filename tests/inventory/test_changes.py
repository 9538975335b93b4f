"""The record's outbox: the inventory records each change itself and hands it to whoever
registered (the analysis, at start-up), without importing them."""

from __future__ import annotations

import pytest

from analysis.services import site_change_consume
from inventory import changes
from inventory import models as inv
from inventory.choices import ChangeStatus
from inventory.services import ct_change_tap, site_import
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db


def test_the_analysis_registers_itself_at_start_up():
    assert site_change_consume in changes.consumers()


def test_a_change_is_recorded_with_no_consumer(monkeypatch, django_capture_on_commit_callbacks):
    monkeypatch.setattr(changes, "_consumers", [])
    with django_capture_on_commit_callbacks(execute=False) as callbacks:
        site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    ct = inv.CurrentTransformer.objects.get(site=site, code="CB-1-A")
    with django_capture_on_commit_callbacks(execute=False) as more:
        ct_change_tap(ct=ct, to=("X1", "X5"), by="tester")
    site.refresh_from_db()
    # Two edits, two rows at the revisions they produced; nothing scheduled by anyone.
    rows = list(inv.SiteChange.objects.filter(site=site).values_list("revision", "status"))
    assert rows == [
        (site.revision - 1, ChangeStatus.PENDING),
        (site.revision, ChangeStatus.PENDING),
    ]
    assert callbacks == [] and more == []


def test_consumers_see_the_row_inside_the_edit(monkeypatch):
    seen: list[tuple[int, int]] = []
    monkeypatch.setattr(changes, "_consumers", [])
    changes.consumer_register(lambda change: seen.append((change.site_id, change.revision)))
    changes.consumer_register(seen.append)
    changes.consumer_register(seen.append)  # registered once, however often asked
    assert len(changes.consumers()) == 2
    site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    assert seen[0] == (site.pk, site.revision)
    assert seen[1] == inv.SiteChange.objects.get(site=site)


def test_changes_done_marks_only_revisions_at_or_below(monkeypatch):
    monkeypatch.setattr(changes, "_consumers", [])
    site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    first = inv.SiteChange.objects.get(site=site)
    later = changes.change_record(site_id=site.pk)  # same revision: also satisfied
    assert changes.changes_done(at={site.pk: first.revision - 1}) == 0
    assert changes.changes_done(at={site.pk: first.revision}) == 2
    later.refresh_from_db()
    assert later.status == ChangeStatus.DONE and later.done_at is not None
    assert changes.changes_done(at={}) == 0
