"""The fleet recompute gives, row for row, the results it gave when the golden file was
written (issue 15, scope 5: every figure stays exactly as it is): 20 generated sites, every
circuit, CT case, CT report, finding and procedure verdict, floats to the last printed digit.
The reference is our own earlier output (the oracle and reference tests check the figures
against outside sources; this test checks that a speed-up changed none of them)."""

from __future__ import annotations

import json

import pytest

from analysis.compute import compute_site
from fixtures.fleet import generate_site
from tests.analysis.engine.fleet_golden import GOLDEN, SEED, SITES, TABLES, digest, site_fingerprint

GOLDEN_SITES = json.loads(GOLDEN.read_text(encoding="utf-8"))


def test_golden_file_covers_the_sites():
    assert GOLDEN_SITES["seed"] == SEED
    assert len(GOLDEN_SITES["sites"]) == SITES


@pytest.mark.parametrize("index", range(SITES))
def test_site_results_are_row_for_row_the_golden_ones(index):
    doc = generate_site(index, seed=SEED)
    want = GOLDEN_SITES["sites"][index]
    assert digest(doc) == want["document"], "the generator changed, not the engine"
    results = compute_site(doc)
    got = site_fingerprint(doc, results)
    for table in TABLES:
        rows = getattr(results, table)
        assert len(got[table]) == len(want[table]), f"{table}: row count changed"
        for n, (g, w) in enumerate(zip(got[table], want[table], strict=True)):
            assert g == w, f"{table} row {n} changed; now: {json.dumps(rows[n], sort_keys=True)}"
