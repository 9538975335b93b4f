"""A fleet CT register (issue 12 item 6): every CT of the invented fleet in one file, imported
through the full validation on PostgreSQL, all sites in one transaction, with a number of
queries that grows with the sites, not with the rows. CI imports 5 sites (about 1,100 rows);
``LOOPKEEP_FLEET_SHEET_SITES=500`` runs the 100,000-row register (``bench_sheet`` times it)."""

from __future__ import annotations

import os

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext

from analysis.management.commands.bench_sheet import _SKELETON, _register_rows
from fixtures.fleet import generate_site
from inventory import models
from inventory.services import site_import
from inventory.sheets import import_table, read_table
from inventory.sheets.writer import CT_HEADERS, ct_register_rows, write_table

SITES = int(os.environ.get("LOOPKEEP_FLEET_SHEET_SITES", "5"))


@pytest.mark.postgres
@pytest.mark.django_db
def test_a_fleet_register_imports_in_one_go_and_exports_back():
    rows: list[list] = []
    for index in range(SITES):
        doc = generate_site(index, seed=3)
        rows += _register_rows(doc)
        site_import(doc={k: doc[k] for k in _SKELETON if k in doc})
    table = read_table(write_table(CT_HEADERS, rows, fmt="xlsx"), name="fleet.xlsx")
    assert len(table.rows) == len(rows)

    with CaptureQueriesContext(connection) as queries:
        result = import_table(table, kind="cts")

    assert (result.rows, result.created, result.updated, result.unchanged) == (
        len(rows),
        len(rows),
        0,
        0,
    )
    assert models.CurrentTransformer.objects.count() == len(rows)
    assert models.CurrentTransformer.history.count() == len(rows)  # one "+" row each
    # Per site a fixed number of statements (lock, read, write per table), none per row.
    assert len(queries) <= 45 * SITES, len(queries)
    exported = [[None if v == "" else v for v in r] for r in ct_register_rows()]
    key = lambda r: (r[0], r[2])  # noqa: E731
    written = sorted(([*r[:9], r[9], r[10], r[11], r[12] or None] for r in rows), key=key)
    assert sorted(exported, key=key) == written
