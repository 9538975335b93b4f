"""The fast yes/no schema check in front of the worded one.

jsonschema (the reference implementation of the draft, whose errors the validator words) walks
the schema anew for every value: about 1 ms per CT with its wires, too slow for a 100,000-CT
import. jsonschema-rs (a compiled validator of the same draft) answers "valid or not" about
twenty times faster. The validator uses it as a gate: a document it passes has no schema
errors; only the list items it rejects go through jsonschema for the full, worded list.

The gate must never pass what jsonschema rejects. The one difference found between the two on
the keywords ``schema.json`` uses is the regular expressions' ``\\s``: Python's takes U+001C to
U+001F and U+FEFF as space, the Rust one does not (and U+0085 the other way round). A document
holding any of those characters, a value that is not plain JSON (NaN, infinity, a YAML date) or
anything jsonschema-rs cannot read goes to jsonschema for every part instead (slower, exact).
"""

from __future__ import annotations

import functools
import json
from collections.abc import Callable
from typing import Any

import jsonschema_rs

# ``\s`` of Python's ``re`` and of jsonschema-rs's regular expressions disagree on these, as
# they appear in ``json.dumps(..., ensure_ascii=True)`` text.
_SPACE_DISAGREEMENTS = ("\\u001c", "\\u001d", "\\u001e", "\\u001f", "\\u0085", "\\ufeff")


def plain_json(doc: Any) -> str | None:
    """``doc`` as JSON text, or None when it holds NaN, infinity or a value JSON has no type
    for (the exact, slow path must look at it)."""
    try:
        return json.dumps(doc, allow_nan=False, ensure_ascii=True)
    except (ValueError, TypeError, RecursionError):
        return None


def _compile(schema: dict) -> Callable[[Any], bool]:
    validator = jsonschema_rs.validator_for(schema, validate_formats=False)

    def passes(value: Any) -> bool:
        try:
            return validator.is_valid(value)
        except Exception:  # a value it cannot read: let jsonschema decide
            return False

    return passes


@functools.cache
def compiled(schema_json: str) -> Callable[[Any], bool]:
    """The gate of a schema given as JSON text (cached by that text)."""
    return _compile(json.loads(schema_json))


def schema_gate(schema: dict) -> Callable[[Any], bool]:
    """The yes/no check of ``schema`` by jsonschema-rs, for plain JSON values."""
    return compiled(json.dumps(schema, sort_keys=True))


def item_schema(schema: dict, section: str) -> dict:
    """The schema of one item of a top-level list, standing alone (the root's ``$defs`` go
    with it so that its ``#/$defs/...`` references resolve)."""
    items = schema["properties"][section]["items"]
    return {"$schema": schema["$schema"], "$defs": schema.get("$defs", {}), **items}


def fast_path_allowed(text: str | None) -> bool:
    """Whether the gate may decide for a document with this JSON text (from
    :func:`plain_json`)."""
    if text is None:
        return False
    # All of them are escapes; most documents have none at all.
    return "\\u" not in text or not any(s in text for s in _SPACE_DISAGREEMENTS)
