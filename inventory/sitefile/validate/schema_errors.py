"""The structure layer: the document against the JSON Schema shipped beside this package
(``schema.json``, draft 2020-12), with jsonschema's messages rewritten into plain words ("must be
greater than 0, got -5") and a procedure step that fits no operation reported against the one
operation it names."""

from __future__ import annotations

import functools
import json
import math
import unicodedata
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

from jsonschema import Draft202012Validator
from jsonschema.exceptions import ValidationError

from inventory.sitefile import gate
from inventory.sitefile.validate.words import SiteFileError, listing, pointer, show, suggest
from record.operations import OPERATION_COMPANIONS
from siterules.procedure_refs import OPERATIONS

SCHEMA_PATH = Path(__file__).parent.parent / "schema.json"

# The operations of a procedure step (``OPERATIONS``, the record's one vocabulary,
# ``record.operations``) are in the order of the schema's oneOf branches.
_OPERATION_COMPANIONS = tuple(k for keys in OPERATION_COMPANIONS.values() for k in keys)

_TYPE_WORDS = {
    "number": "a number",
    "integer": "a whole number",
    "string": "text",
    "boolean": "true or false",
    "array": "a list",
    "object": "an object",
    "null": "null",
}

# Messages for the schema's patterns, by the name of the $defs entry that holds each.
_PATTERN_WORDS = {
    "code": "must be a code or name: printable, without spaces or ':'",
    "terminal_name": "must be a terminal name: printable, without spaces or ':'",
    "switch_code": (
        "must be a switch code such as 'TS-101/1' (printable, no spaces or ':', at most one '/')"
    ),
    "terminal": (
        "must be a terminal 'OWNER:NAME' such as 'TB-101:4' (printable, no spaces; the owner "
        "up to 60 characters, the name up to 30)"
    ),
}


def _pattern_words(pattern: str, value: Any) -> str:
    """Why a code does not match its pattern: the invisible character it holds, if any, else
    what the pattern asks for."""
    if isinstance(value, str):
        for char in value:
            if unicodedata.category(char) in ("Cc", "Cf", "Zl", "Zp"):
                label = unicodedata.name(char, "a control character")
                return (
                    f"holds the invisible character U+{ord(char):04X} ({label}); a code is "
                    "printable text"
                )
    defs = load_schema()["$defs"]
    for name, words in _PATTERN_WORDS.items():
        if defs[name]["pattern"] == pattern:
            return words
    return f"must match {pattern}"


@functools.cache
def load_schema() -> dict:
    """The JSON Schema of ``loopkeep.site/1`` (draft 2020-12) as a dict."""
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


@functools.cache
def _validator() -> Draft202012Validator:
    schema = load_schema()
    Draft202012Validator.check_schema(schema)
    return Draft202012Validator(schema)


@functools.cache
def field_rank() -> dict[str, int]:
    """Property names in the order the schema declares them: errors are listed in that order
    inside each object (``code`` before ``equipment`` before ``terminals`` ...)."""
    rank: dict[str, int] = {}

    def walk(node: Any) -> None:
        if isinstance(node, dict):
            for name in node.get("properties", {}):
                rank.setdefault(name, len(rank))
            for value in node.values():
                walk(value)
        elif isinstance(node, list):
            for value in node:
                walk(value)

    walk(load_schema())
    return rank


@functools.cache
def _gates() -> tuple[Callable[[Any], bool], dict[str, tuple[Callable[[Any], bool], Any]]]:
    """The fast yes/no check of the whole document, and per top-level list the fast check of
    one item with the jsonschema validator that words its errors."""
    schema = load_schema()
    per_item = {}
    for section, sub in schema["properties"].items():
        if isinstance(sub, dict) and "items" in sub:
            per_item[section] = (
                gate.schema_gate(gate.item_schema(schema, section)),
                _validator().evolve(schema=sub["items"]),
            )
    return gate.schema_gate(schema), per_item


def schema_errors(doc: dict, text: str | None) -> Iterator[SiteFileError]:
    """Schema errors of the document (``text``: its plain JSON, see ``gate.plain_json``).
    jsonschema-rs passes a good document in one fast walk; when it fails, jsonschema words the
    errors of the top level (with the lists emptied) and of each list item the gate rejects,
    so a few bad rows among 100,000 stay cheap. Where the gate may not decide, jsonschema
    checks every item."""
    whole, per_item = _gates()
    fast = gate.fast_path_allowed(text)
    if fast and whole(doc):
        return
    skeleton = {key: [] if isinstance(value, list) else value for key, value in doc.items()}
    for error in _validator().iter_errors(skeleton):
        yield from _translate(error, ())
    for section, (item_ok, item_validator) in per_item.items():
        items = doc.get(section)
        if not isinstance(items, list):
            continue
        for index, item in enumerate(items):
            if not (fast and item_ok(item)):
                for error in item_validator.iter_errors(item):
                    yield from _translate(error, (section, index))


def _translate(error: ValidationError, prefix: tuple[Any, ...]) -> Iterator[SiteFileError]:
    path = [*prefix, *error.absolute_path]
    keyword = error.validator
    value = error.validator_value
    instance = error.instance
    schema = error.schema if isinstance(error.schema, dict) else {}

    if "propertyNames" in error.relative_schema_path:
        # jsonschema reports a bad key at the object holding it; point at the key itself.
        path = [*path, instance]

    if isinstance(instance, float) and not math.isfinite(instance):
        return  # the values layer says "must be a finite number" at the same pointer
    if keyword == "required":
        for name in value:
            if isinstance(instance, dict) and name not in instance:
                yield SiteFileError(pointer(*path, name), "required field is missing")
    elif keyword == "additionalProperties" and value is False:
        allowed = list(schema.get("properties", {}))
        for key in instance:
            if key not in allowed:
                hint = suggest(str(key), allowed) or f"; expected one of {listing(allowed)}"
                yield SiteFileError(pointer(*path, key), f"unknown field{hint}")
    elif keyword == "type":
        yield SiteFileError(
            pointer(*path), f"must be {_TYPE_WORDS.get(value, value)}, got {show(instance)}"
        )
    elif keyword == "exclusiveMinimum":
        yield SiteFileError(
            pointer(*path), f"must be greater than {show(value)}, got {show(instance)}"
        )
    elif keyword == "minimum":
        yield SiteFileError(pointer(*path), f"must be at least {show(value)}, got {show(instance)}")
    elif keyword == "maximum":
        yield SiteFileError(pointer(*path), f"must be at most {show(value)}, got {show(instance)}")
    elif keyword == "exclusiveMaximum":
        yield SiteFileError(
            pointer(*path), f"must be less than {show(value)}, got {show(instance)}"
        )
    elif keyword == "enum":
        yield SiteFileError(
            pointer(*path),
            f"must be one of {listing(show(v) for v in value)}, got {show(instance)}",
        )
    elif keyword == "const":
        yield SiteFileError(pointer(*path), f"must be {show(value)}, got {show(instance)}")
    elif keyword in ("minItems", "maxItems"):
        low, high = schema.get("minItems"), schema.get("maxItems")
        if low is not None and low == high:
            need = f"exactly {low}"
        elif keyword == "minItems":
            need = f"at least {value}"
        else:
            need = f"at most {value}"
        noun = "item" if value == 1 else "items"
        yield SiteFileError(pointer(*path), f"must hold {need} {noun}, got {len(instance)}")
    elif keyword == "minProperties":
        yield SiteFileError(
            pointer(*path), f"must hold at least {value} entries, got {len(instance)}"
        )
    elif keyword == "minLength":
        yield SiteFileError(pointer(*path), "must not be empty")
    elif keyword == "maxLength":
        yield SiteFileError(
            pointer(*path),
            f"must be at most {value} characters (the database column), got {len(instance)}",
        )
    elif keyword == "maxProperties":
        yield SiteFileError(
            pointer(*path), f"must hold at most {value} entries, got {len(instance)}"
        )
    elif keyword == "pattern":
        yield SiteFileError(
            pointer(*path), f"{_pattern_words(value, instance)}, got {show(instance)}"
        )
    elif keyword == "oneOf" and schema is load_schema()["$defs"]["operation"]:
        yield from _translate_step(error, path, prefix)
    else:
        yield SiteFileError(pointer(*path), error.message)


def _translate_step(
    error: ValidationError, path: list[Any], prefix: tuple[Any, ...]
) -> Iterator[SiteFileError]:
    """A procedure step failed every operation shape: say what is wrong with the one it is
    meant to be (picked by its operation key), not with all ten."""
    step = error.instance
    if not isinstance(step, dict):
        yield SiteFileError(
            pointer(*path), f"must be an object naming one operation, got {show(step)}"
        )
        return
    found = [key for key in step if key in OPERATIONS]
    if len(found) > 1:
        yield SiteFileError(
            pointer(*path), f"a step holds one operation, this one has {listing(found)}"
        )
        return
    if not found:
        yield SiteFileError(
            pointer(*path), f"names no operation; a step needs one of {listing(OPERATIONS)}"
        )
        allowed = (*OPERATIONS, *_OPERATION_COMPANIONS)
        for key in step:
            if key not in allowed:
                yield SiteFileError(
                    pointer(*path, key), f"unknown field{suggest(str(key), allowed)}"
                )
        return
    branch = OPERATIONS.index(found[0])
    for sub in error.context or ():
        if sub.relative_schema_path and sub.relative_schema_path[0] == branch:
            yield from _translate(sub, prefix)
