"""The fleet's results as a compact fingerprint, to hold a refactor of the recompute to
"every figure exactly as before".

For each of :data:`SITES` generated sites (``fixtures.fleet.generate_site(i, seed=SEED)``) and
each table that ``analysis.compute.compute_site`` returns (circuits, CT cases, CT reports,
findings, procedure verdicts), one short digest per row, in row order, of the row's canonical
JSON (``json.dumps(sort_keys=True)``: floats as ``repr`` prints them, so to the last digit).
The document of each site is fingerprinted too, so that a change of the generator shows as
such and not as a change of the engine.

Write the file again (only when a change of a figure is intended and explained in the commit):
``python -m tests.analysis.engine.fleet_golden``.
"""

from __future__ import annotations

import hashlib
import json
import sys
from pathlib import Path
from typing import Any

from analysis.compute import SiteResults, compute_site
from fixtures.fleet import generate_site

SEED = 20261202
SITES = 20
TABLES = ("circuits", "ct_cases", "ct_reports", "findings", "verdicts")
GOLDEN = Path(__file__).with_name("fleet_golden.json")


def digest(value: Any) -> str:
    """12 hex digits of the SHA-256 of ``value``'s canonical JSON."""
    text = json.dumps(value, sort_keys=True, ensure_ascii=False)
    return hashlib.sha256(text.encode()).hexdigest()[:12]


def site_fingerprint(doc: dict[str, Any], results: SiteResults) -> dict[str, Any]:
    """``{"document": digest, table: [row digest, ...]}`` of one site."""
    out: dict[str, Any] = {"document": digest(doc)}
    for table in TABLES:
        out[table] = [digest(row) for row in getattr(results, table)]
    return out


def fleet_fingerprint(sites: int = SITES, seed: int = SEED) -> list[dict[str, Any]]:
    """The fingerprint of the first ``sites`` generated sites."""
    out = []
    for index in range(sites):
        doc = generate_site(index, seed=seed)
        out.append(site_fingerprint(doc, compute_site(doc)))
    return out


def main() -> int:
    fp = fleet_fingerprint()
    GOLDEN.write_text(
        json.dumps({"seed": SEED, "sites": fp}, separators=(",", ":")) + "\n", encoding="utf-8"
    )
    rows = sum(len(site[t]) for site in fp for t in TABLES)
    print(f"wrote {GOLDEN} ({SITES} sites, {rows} rows)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
