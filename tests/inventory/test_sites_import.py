"""``sites_import``: several site files in one transaction (the bulk load's chunk) import
exactly what ``site_import`` of each gives: the same record, the same history rows, the same
counts and recompute requests; a bad file writes nothing of the chunk and its errors name the
file and the JSON pointer; an unchanged chunk writes nothing, a changed site only its change."""

from __future__ import annotations

import copy

import pytest

import record as rec
from analysis import services
from fixtures.fleet import generate_site
from inventory import models
from inventory.changes import SiteChange
from inventory.selectors import site_document
from inventory.services import SiteImportError, site_import, sites_import
from tests.inventory.docs import small_site
from tests.inventory.test_import_export import RECORD_MODELS

pytestmark = pytest.mark.django_db


def _fleet(indexes: range, prefix: str = "S") -> list[dict]:
    """Generated sites in the record's canonical form, their codes starting with ``prefix``
    (the site code names nothing inside the site, so a renamed copy is the same site)."""
    docs = []
    for index in indexes:
        doc = rec.record_to_document(
            rec.canonical(rec.record_from_document(generate_site(index, seed=1)))
        )
        doc["site"]["code"] = prefix + doc["site"]["code"][1:]
        docs.append(doc)
    return docs


def _rows(code: str) -> dict[str, int]:
    """Rows and '+' history rows per model of one site."""
    site = models.Site.objects.get(code=code)
    counts = {}
    for model in RECORD_MODELS:
        path = {
            models.Bus: "site",
            models.Equipment: "site",
            models.TerminalBlock: "site",
            models.CurrentTransformer: "site",
            models.Terminal: "site",
            models.TapChange: "ct__site",
            models.Device: "site",
            models.DeviceInput: "device__site",
            models.DeviceOutput: "device__site",
            models.Wire: "site",
            models.Link: "site",
            models.Ground: "site",
            models.Switch: "site",
            models.SwitchPosition: "switch__site",
            models.SwitchContact: "switch__site",
            models.Procedure: "site",
            models.ProcedureStep: "procedure__site",
        }[model]
        ids = list(model.objects.filter(**{path: site}).values_list("pk", flat=True))
        added = model.history.model.objects.filter(id__in=ids, history_type="+").count()
        assert added == len(ids), model.__name__  # one "+" row for every row written
        counts[model.__name__] = len(ids)
    return counts


def test_a_chunk_imports_what_each_site_import_gives(django_user_model):
    clerk = django_user_model.objects.create(username="clerk")
    chunk, single = _fleet(range(3), "S"), _fleet(range(3), "T")
    with services.recompute_deferred():
        results = sites_import(docs=[(f"{d['site']['code']}.json", d) for d in chunk], user=clerk)
        alone = [site_import(doc=d, user=clerk) for d in single]
    assert [(r.created, r.updated, r.deleted) for r in results] == [
        (r.created, r.updated, r.deleted) for r in alone
    ]
    for mine, theirs in zip(chunk, single, strict=True):
        code, other = mine["site"]["code"], theirs["site"]["code"]
        exported = site_document(models.Site.objects.get(code=code))
        assert exported == mine
        assert {**exported, "site": theirs["site"]} == site_document(
            models.Site.objects.get(code=other)
        )
        assert _rows(code) == _rows(other)
    users = {
        m.history.model.objects.values_list("history_user_id", flat=True).distinct().get()
        for m in RECORD_MODELS
    }
    assert users == {clerk.pk}
    # Each site got its revision and its recompute request, as one import each would.
    assert set(models.Site.objects.values_list("code", "revision")) == {
        (d["site"]["code"], 2) for d in chunk + single
    }
    assert SiteChange.objects.count() == 6


def test_a_bad_file_writes_nothing_of_the_chunk_and_names_file_and_pointer():
    good, bad, worse = small_site("A"), small_site("B"), small_site("C")
    bad["cts"][1]["phase"] = "Q"
    worse["wires"][0]["to"] = "NOWHERE:1"
    with pytest.raises(SiteImportError) as info:
        sites_import(docs=[("a.json", good), ("b.json", bad), ("c.json", worse)])
    assert [e.split(": ")[:2] for e in info.value.errors] == [
        ["b.json", "/cts/1/phase"],
        ["c.json", "/wires/0/to"],
    ]
    assert not models.Site.objects.exists()
    assert not any(m.history.model.objects.exists() for m in RECORD_MODELS)


def test_history_it_would_rewrite_is_refused_with_the_file_named():
    doc = small_site("A")
    doc["cts"][0]["tap_changes"] = [
        {"from": ["X1", "X5"], "to": ["X1", "X4"], "at": "2023-04-18T08:45:00Z", "reason": "WO-1"}
    ]
    site_import(doc=doc)
    changed = copy.deepcopy(doc)
    changed["cts"][0]["tap_changes"][0]["reason"] = "WO-2"
    before = models.TapChange.objects.count(), models.Site.objects.get().revision
    with pytest.raises(SiteImportError) as info:
        sites_import(docs=[("new.json", small_site("B")), ("a.json", changed)])
    assert info.value.errors == [
        "a.json: /cts/0/tap_changes/0/reason: the tap change recorded at this time has reason "
        "'WO-1'; recorded history cannot be changed by an import (record a new change instead)"
    ]
    assert (models.TapChange.objects.count(), models.Site.objects.get().revision) == before
    assert not models.Site.objects.filter(code="B").exists()


def test_an_unchanged_chunk_writes_nothing_and_a_changed_site_only_its_change():
    docs = [small_site("A"), small_site("B")]
    sites_import(docs=[(d["site"]["code"], d) for d in docs])
    history = {m: m.history.model.objects.count() for m in (models.Site, *RECORD_MODELS)}
    revisions = dict(models.Site.objects.values_list("code", "revision"))
    again = sites_import(docs=[(d["site"]["code"], copy.deepcopy(d)) for d in docs])
    assert [r.changed for r in again] == [False, False]
    assert {m: m.history.model.objects.count() for m in history} == history
    assert dict(models.Site.objects.values_list("code", "revision")) == revisions
    changed = copy.deepcopy(docs[1])
    changed["wires"][0]["length_m"] = 12.5
    results = sites_import(docs=[("A", copy.deepcopy(docs[0])), ("B", changed)])
    assert [(r.changed, dict(r.updated)) for r in results] == [(False, {}), (True, {"wires": 1})]
    grown = {
        m.__name__: m.history.model.objects.count() - n
        for m, n in history.items()
        if m.history.model.objects.count() != n
    }
    assert grown == {"Wire": 1}
    assert dict(models.Site.objects.values_list("code", "revision")) == {
        "A": revisions["A"],
        "B": revisions["B"] + 1,
    }


def test_the_same_site_twice_in_a_chunk_is_two_imports_one_after_the_other():
    first, second = small_site("A"), small_site("A")
    second["wires"][0]["length_m"] = 12.5
    results = sites_import(docs=[("a1.json", first), ("a2.json", second)])
    assert results[0].created["sites"] == 1
    assert (dict(results[1].created), dict(results[1].updated)) == ({}, {"wires": 1})
    assert site_document(models.Site.objects.get(code="A")) == second
    assert models.Site.objects.get(code="A").revision == 3
    assert models.Wire.history.model.objects.filter(history_type="~").count() == 1


def test_a_dry_run_chunk_writes_nothing_and_counts_what_it_would_do():
    results = sites_import(docs=[("a", small_site("A")), ("b", small_site("B"))], dry_run=True)
    assert [r.created["sites"] for r in results] == [1, 1]
    assert all(r.dry_run for r in results)
    assert not models.Site.objects.exists()
    assert not any(m.history.model.objects.exists() for m in RECORD_MODELS)
