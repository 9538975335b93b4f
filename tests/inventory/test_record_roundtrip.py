"""Site file → record → database → record → site file: identical for the demo sites and for
200 generated sites, and the database reader's query count does not grow with the sites."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import record as rec
from analysis import services
from fixtures.fleet import generate_site
from inventory import models
from inventory.selectors import site_document, site_record, site_records
from inventory.services import site_import
from inventory.sitefile.validate import load_site_file
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db

DEMO_FILES = sorted((Path(__file__).resolve().parents[2] / "fixtures" / "demo").glob("*.json"))
# One query per record table: sites, terminals, buses, equipment, terminal blocks, tap changes,
# CTs, device inputs, device outputs, devices, wires, links, grounds, switch positions,
# switch contacts, switches, procedure steps, procedures.
RECORD_QUERIES = 18


def _through_database(doc: dict) -> tuple[rec.SiteRecord, rec.SiteRecord]:
    """(the canonical record of the file, the record read back after importing it)."""
    from_file = rec.canonical(rec.record_from_document(doc))
    result = site_import(doc=rec.record_to_document(from_file))
    return from_file, site_record(models.Site.objects.get(code=result.site))


@pytest.mark.parametrize("path", DEMO_FILES, ids=lambda p: p.stem)
def test_demo_site_round_trip_through_the_database_is_identical(path):
    from_file, from_db = _through_database(load_site_file(path))
    assert from_db == from_file
    text = json.dumps(rec.record_to_document(from_file), indent=2)
    assert json.dumps(rec.record_to_document(from_db), indent=2) == text
    assert json.dumps(site_document(models.Site.objects.get(code=from_file.code)), indent=2) == (
        text
    )


def test_generated_fleet_round_trip_through_the_database_is_identical():
    """200 sites of the synthetic fleet (fixtures.fleet, seed 1), read back in one go."""
    expected: dict[str, rec.SiteRecord] = {}
    with services.recompute_deferred():
        for index in range(200):
            doc = generate_site(index, seed=1)
            r = rec.canonical(rec.record_from_document(doc))
            site_import(doc=rec.record_to_document(r))
            expected[r.code] = r
    ids = list(models.Site.objects.values_list("pk", flat=True))
    read = {r.code: r for r in site_records(ids).values()}
    assert sorted(read) == sorted(expected)
    differing = [code for code, r in expected.items() if read[code] != r]
    assert differing == []
    for code in sorted(expected)[::20]:
        assert json.dumps(rec.record_to_document(read[code])) == json.dumps(
            rec.record_to_document(expected[code])
        )


def test_site_records_is_one_query_per_table_whatever_the_number_of_sites(
    django_assert_num_queries,
):
    with services.recompute_deferred():
        for code in ("AAA", "BBB", "CCC"):
            site_import(doc=small_site(code))
    ids = list(models.Site.objects.order_by("pk").values_list("pk", flat=True))
    with django_assert_num_queries(RECORD_QUERIES):
        one = site_records(ids[:1])
    with django_assert_num_queries(RECORD_QUERIES):
        three = site_records(ids)
    assert list(one) == ids[:1] and sorted(three) == ids
    assert [r.code for r in three.values()] == ["AAA", "BBB", "CCC"]
    assert three[ids[0]] == one[ids[0]]
    # The SQL is compiled once per table and number of sites: another site of the same number
    # reads its own rows, not the first one's.
    with django_assert_num_queries(RECORD_QUERIES):
        other = site_records(ids[2:3])
    assert list(other) == ids[2:3] and other[ids[2]] == three[ids[2]]
    assert other[ids[2]].code == "CCC" and one[ids[0]].code == "AAA"
    # the export is the record serialised: the same queries, nothing more
    site = models.Site.objects.get(pk=ids[1])
    with django_assert_num_queries(RECORD_QUERIES):
        site_document(site)


def test_a_record_read_from_the_database_feeds_the_engine_like_its_file():
    from analysis.compute import compute_site

    doc = small_site()
    site_import(doc=doc)
    from_db = compute_site(site_record(models.Site.objects.get(code="TST")))
    from_file = compute_site(doc)
    assert from_db.verdicts == from_file.verdicts
    assert from_db.ct_reports == from_file.ct_reports
    assert from_db.findings == from_file.findings
