"""A yes/no JSON Schema check compiled to closures, for the keywords ``schema.json`` uses.

jsonschema walks the schema anew for every value (about 1 ms per CT with its wires), which is
too slow for a 100,000-CT import. This module turns the schema once into nested Python
closures that answer only "valid or not" - an order of magnitude faster. The validator uses it
as a gate: the parts it passes have no schema errors; only the parts it rejects go through
jsonschema for the full, worded list. It must therefore never pass what jsonschema rejects:
it follows the draft 2020-12 semantics of each keyword (types exclude booleans from numbers,
``enum``/``const`` do not equate ``true`` with ``1``, ``pattern`` is a search) and refuses to
compile a schema with a keyword it does not implement.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

Check = Callable[[Any], bool]

# Keywords that carry no assertion.
_ANNOTATIONS = frozenset(
    {"$schema", "$id", "$comment", "$defs", "title", "description", "default", "examples"}
)


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


_TYPES: dict[str, Check] = {
    "object": lambda v: isinstance(v, dict),
    "array": lambda v: isinstance(v, list),
    "string": lambda v: isinstance(v, str),
    "number": _is_number,
    "integer": lambda v: (
        _is_number(v) and (isinstance(v, int) or (isinstance(v, float) and v.is_integer()))
    ),
    "boolean": lambda v: isinstance(v, bool),
    "null": lambda v: v is None,
}


def _equal(a: Any, b: Any) -> bool:
    """JSON equality: booleans are not numbers; 5 equals 5.0."""
    if isinstance(a, bool) or isinstance(b, bool):
        return isinstance(a, bool) and isinstance(b, bool) and a == b
    if _is_number(a) and _is_number(b):
        return a == b
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_equal(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_equal(a[k], b[k]) for k in a)
    return type(a) is type(b) and a == b


_OBJECT_WORDS = frozenset(
    {"type", "properties", "required", "additionalProperties", "minProperties", "propertyNames"}
)
_NUMBER_WORDS = frozenset({"type", "minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum"})


def _ge(a: float, b: float) -> bool:
    return a >= b


def _le(a: float, b: float) -> bool:
    return a <= b


def _gt(a: float, b: float) -> bool:
    return a > b


def _lt(a: float, b: float) -> bool:
    return a < b


def compile_schema(root: dict) -> Callable[[dict], Check]:
    """Return ``compile(subschema) -> check`` for subschemas of ``root`` (refs resolved in it)."""
    cache: dict[int, Check] = {}

    def resolve(ref: str) -> dict:
        if not ref.startswith("#/"):
            raise ValueError(f"only local $ref is supported, got {ref!r}")
        node: Any = root
        for token in ref[2:].split("/"):
            node = node[token.replace("~1", "/").replace("~0", "~")]
        return node

    def build(schema: Any) -> Check:
        if schema is True:
            return lambda v: True
        if schema is False:
            return lambda v: False
        key = id(schema)
        if key in cache:
            return cache[key]
        # Placeholder for (unused here, but harmless) recursive refs.
        cache[key] = lambda v: cache[key](v)
        words = {w: a for w, a in schema.items() if w not in _ANNOTATIONS}
        check = specialised(words) or generic(words, schema)
        cache[key] = check
        return check

    def generic(words: dict, schema: dict) -> Check:
        checks = tuple(keyword(word, arg, schema) for word, arg in words.items())
        if len(checks) == 1:
            return checks[0]

        def check(v: Any) -> bool:
            return all(c(v) for c in checks)

        return check

    def specialised(words: dict) -> Check | None:
        """Single closures for the common shapes (an object with properties, a list of items,
        a bounded number, a text with a pattern, an enum): the hot paths of a big file."""
        kind = words.get("type")
        keys = set(words)
        if keys == {"$ref"}:
            return build(resolve(words["$ref"]))
        if kind == "object" and keys <= _OBJECT_WORDS and "patternProperties" not in keys:
            return object_check(words)
        if kind == "array" and keys <= {"type", "items", "minItems", "maxItems"}:
            return array_check(words)
        if kind == "number" and keys <= _NUMBER_WORDS:
            return number_check(words)
        if kind == "string" and keys <= {"type", "minLength", "pattern"}:
            return string_check(words)
        if keys == {"enum"} and all(isinstance(o, str) for o in words["enum"]):
            options = frozenset(words["enum"])
            return lambda v: type(v) is str and v in options
        if keys == {"enum"} and all(_is_number(o) for o in words["enum"]):
            numbers = frozenset(words["enum"])
            return lambda v: type(v) in (int, float) and v in numbers
        return None

    def object_check(words: dict) -> Check:
        props = {name: build(sub) for name, sub in words.get("properties", {}).items()}
        required = tuple(words.get("required", ()))
        min_props = words.get("minProperties", 0)
        extra_schema = words.get("additionalProperties", True)
        extra = None if extra_schema is False else build(extra_schema)
        names = build(words["propertyNames"]) if "propertyNames" in words else None

        def check(v: Any) -> bool:
            if type(v) is not dict:
                return False
            for name in required:
                if name not in v:
                    return False
            if len(v) < min_props:
                return False
            for k, x in v.items():
                c = props.get(k)
                if c is None:
                    if extra is None or not extra(x):
                        return False
                elif not c(x):
                    return False
                if names is not None and not names(k):
                    return False
            return True

        return check

    def array_check(words: dict) -> Check:
        low = words.get("minItems", 0)
        high = words.get("maxItems")
        item = build(words["items"]) if "items" in words else None

        def check(v: Any) -> bool:
            if type(v) is not list or len(v) < low or (high is not None and len(v) > high):
                return False
            if item is not None:
                for x in v:
                    if not item(x):
                        return False
            return True

        return check

    def number_check(words: dict) -> Check:
        bounds = tuple(
            (op, words[word])
            for word, op in (
                ("minimum", _ge),
                ("maximum", _le),
                ("exclusiveMinimum", _gt),
                ("exclusiveMaximum", _lt),
            )
            if word in words
        )
        if len(bounds) == 1:
            ((op, limit),) = bounds
            return lambda v: type(v) in (int, float) and op(v, limit)
        return lambda v: type(v) in (int, float) and all(op(v, lim) for op, lim in bounds)

    def string_check(words: dict) -> Check:
        min_len = words.get("minLength", 0)
        search = re.compile(words["pattern"]).search if "pattern" in words else None
        if search is None:
            return lambda v: type(v) is str and len(v) >= min_len
        return lambda v: type(v) is str and len(v) >= min_len and search(v) is not None

    def keyword(word: str, arg: Any, schema: dict) -> Check:
        if word == "$ref":
            target = build(resolve(arg))
            return lambda v: target(v)
        if word == "type":
            names = [arg] if isinstance(arg, str) else list(arg)
            tests = tuple(_TYPES[n] for n in names)
            return lambda v: any(t(v) for t in tests)
        if word == "const":
            return lambda v: _equal(v, arg)
        if word == "enum":
            options = tuple(arg)
            return lambda v: any(_equal(v, o) for o in options)
        if word == "minimum":
            return lambda v: not _is_number(v) or v >= arg
        if word == "maximum":
            return lambda v: not _is_number(v) or v <= arg
        if word == "exclusiveMinimum":
            return lambda v: not _is_number(v) or v > arg
        if word == "exclusiveMaximum":
            return lambda v: not _is_number(v) or v < arg
        if word == "minLength":
            return lambda v: not isinstance(v, str) or len(v) >= arg
        if word == "maxLength":
            return lambda v: not isinstance(v, str) or len(v) <= arg
        if word == "pattern":
            search = re.compile(arg).search
            return lambda v: not isinstance(v, str) or search(v) is not None
        if word == "minItems":
            return lambda v: not isinstance(v, list) or len(v) >= arg
        if word == "maxItems":
            return lambda v: not isinstance(v, list) or len(v) <= arg
        if word == "items":
            item = build(arg)
            return lambda v: not isinstance(v, list) or all(item(x) for x in v)
        if word == "minProperties":
            return lambda v: not isinstance(v, dict) or len(v) >= arg
        if word == "required":
            names = tuple(arg)
            return lambda v: not isinstance(v, dict) or all(n in v for n in names)
        if word == "properties":
            props = tuple((name, build(sub)) for name, sub in arg.items())
            return lambda v: not isinstance(v, dict) or all(c(v[n]) for n, c in props if n in v)
        if word == "additionalProperties":
            known = frozenset(schema.get("properties", ()))
            if "patternProperties" in schema:
                raise ValueError("patternProperties is not supported")
            if arg is False:
                return lambda v: not isinstance(v, dict) or all(k in known for k in v)
            extra = build(arg)
            return lambda v: (
                not isinstance(v, dict) or all(extra(x) for k, x in v.items() if k not in known)
            )
        if word == "propertyNames":
            name = build(arg)
            return lambda v: not isinstance(v, dict) or all(name(k) for k in v)
        if word == "oneOf":
            branches = tuple(build(b) for b in arg)
            return lambda v: sum(1 for b in branches if b(v)) == 1
        raise ValueError(f"keyword {word!r} is not supported by the fast check")

    return build
