"""Reading and checking a site file (format ``loopkeep.site/1``) before anything is written.

Pure Python (no Django), one concern per module, every problem reported with its JSON pointer
(RFC 6901) so a records clerk can go straight to it:

- ``loading``: bytes to a document (size limit, regular files only, UTF-8, JSON or YAML, keys
  given twice, YAML aliases refused);
- ``values``: what no field may hold (types JSON has not, NaN, NUL, lone surrogates, nesting);
- ``schema_errors``: structure against the JSON Schema (``schema.json``: required fields, types,
  ranges, lengths, code characters, misspelt keys), in plain words;
- ``sense``: references between the parts and physical sense, one module per section;
- ``words``: the error type, pointers and how values are shown.

Everything runs in one pass per section with dictionaries and sets, so the cost grows linearly
with the file (the spreadsheet importer pushes 100,000 CTs through here).
"""

from __future__ import annotations

import itertools
from typing import Any

from inventory.sitefile import gate
from inventory.sitefile.validate.loading import (
    DEFAULT_MAX_BYTES,
    SiteFileParseError,
    load_site_bytes,
    load_site_file,
    load_site_text,
)
from inventory.sitefile.validate.schema_errors import (
    SCHEMA_PATH,
    field_rank,
    load_schema,
    schema_errors,
)
from inventory.sitefile.validate.sense import SenseChecker, record_names
from inventory.sitefile.validate.values import needs_walk, value_errors
from inventory.sitefile.validate.words import SiteFileError, kind, sort_key
from siterules.procedure_refs import OPERATIONS

__all__ = [
    "DEFAULT_MAX_BYTES",
    "FORMAT",
    "MAX_ERRORS",
    "OPERATIONS",
    "SCHEMA_PATH",
    "SiteFileError",
    "SiteFileParseError",
    "load_schema",
    "load_site_bytes",
    "load_site_file",
    "load_site_text",
    "record_names",
    "validate_site_document",
]

FORMAT = "loopkeep.site/1"


# Errors collected from one document at most: past this the file is wrong throughout and the
# rest would cost time and memory to find and nobody would read them (the commands print the
# first hundred).
MAX_ERRORS = 10_000


def validate_site_document(doc: Any, *, max_errors: int = MAX_ERRORS) -> list[SiteFileError]:
    """Every problem in a parsed site file, values, structure (JSON Schema) and sense
    (references, duplicates, physically impossible values), in document order. An empty list
    means the document may be imported.

    Wire sizes are checked against ``trade.conductors`` and accuracy strings against
    ``trade.accuracy.parse_accuracy`` (IEEE C57.13 / IEC 61869-2 classes), the same tables the
    engine computes with, so the importer accepts exactly what the engine can compute with.
    A document holding what JSON cannot (a YAML set, a key that is not text, nesting deeper
    than a site file has) gets only those errors: the other layers would misread it.
    """
    if not isinstance(doc, dict):
        return [SiteFileError("", f"a site file must be an object, got {kind(doc)}")]
    # One C-speed dump finds a good document's values good; the walk names where they are not.
    text = gate.plain_json(doc)
    errors: list[SiteFileError] = []
    if needs_walk(text):
        errors, unreadable = value_errors(doc)
        if unreadable:
            return _in_order(errors)
    errors.extend(itertools.islice(schema_errors(doc, text), max_errors))
    if len(errors) < max_errors:
        errors.extend(SenseChecker(doc, max_errors=max_errors - len(errors)).run())
    if len(errors) >= max_errors:
        return [
            *_in_order(errors[:max_errors]),
            SiteFileError("", f"more than {max_errors:,} errors; stopped looking for more"),
        ]
    return _in_order(errors)


def _in_order(errors: list[SiteFileError]) -> list[SiteFileError]:
    unique = list(dict.fromkeys(errors))
    rank = field_rank()
    unique.sort(key=lambda error: sort_key(error, rank))
    return unique
