"""Answers kept per site version (``analysis.actions``): a kept verdict must never answer for
a record it was not computed from. A revision number alone can come back with other content (a
write that bumped it and was rolled back after something read the site; SQLite giving a deleted
site's id to a new site, whose revision starts at 1 again), so the key is the site's
``record_version``: site, revision and a key drawn afresh with every revision.
Common practice, no source: a cache key must name everything the answer depends on."""

from __future__ import annotations

import pytest
from django.db import transaction

from analysis import actions
from inventory import models
from inventory.services import site_delete, site_import, site_record_change
from tests.inventory.docs import small_site


class _Refused(Exception):
    pass


@pytest.mark.django_db(transaction=True)
def test_a_rolled_back_revision_never_names_the_committed_one():
    site_import(doc=small_site())
    site = models.Site.objects.get(code="TST")
    seen_inside = None
    with pytest.raises(_Refused), transaction.atomic():
        site_record_change(site_id=site.pk)
        seen_inside = models.Site.objects.get(pk=site.pk).record_version
        raise _Refused
    site_record_change(site_id=site.pk)
    committed = models.Site.objects.get(pk=site.pk)
    assert committed.revision == site.revision + 1
    assert seen_inside is not None and seen_inside.split(":")[1] == str(committed.revision)
    assert committed.record_version != seen_inside


@pytest.mark.django_db(transaction=True)
def test_a_new_site_in_a_deleted_sites_place_gets_its_own_answers():
    """The verdict kept for a deleted site is not served for the site imported after it, even
    where both have the same code, the same revision and (SQLite) the same id."""
    actions.clear_kept()
    site_import(doc=small_site())
    first = models.Site.objects.get(code="TST")
    loads = []

    def load(tag):
        def _load():
            loads.append(tag)
            return small_site()

        return _load

    actions.site_netlist(first.record_version, load("first"))
    site_delete(site=first)
    site_import(doc=small_site())
    second = models.Site.objects.get(code="TST")
    assert second.revision == first.revision
    actions.site_netlist(second.record_version, load("second"))
    assert loads == ["first", "second"]
    actions.clear_kept()
