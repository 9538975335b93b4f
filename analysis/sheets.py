"""The findings as a sheet (``export_sheet --kind findings`` and the API's export): the
findings JSON of design.md, one row each, with the numbers behind the message as JSON."""

from __future__ import annotations

import json
from collections.abc import Iterable
from typing import Any

from analysis.selectors import FINDING_FIELDS, finding_json, findings_queryset

# design.md's findings JSON, with the numbers behind the message before the time stamp.
FINDING_HEADERS = [*FINDING_FIELDS[:11], "numbers", *FINDING_FIELDS[11:]]


def finding_rows(*, site: str | None = None) -> Iterable[list[Any]]:
    """Every stored finding (of one site), most severe first within each site."""
    for row in findings_queryset(site=site).iterator(chunk_size=5000):
        body = finding_json(row)
        body["numbers"] = json.dumps(row.numbers, sort_keys=True) if row.numbers else None
        yield [body[h] for h in FINDING_HEADERS]
