"""Issue 11, item 8: a property-based fuzz of the loader and the validator: whatever the bytes
or the values, the loader either returns a document or raises ``SiteFileParseError``, and the
validator returns a list of errors; no other exception escapes. Derandomized and bounded so it
runs in seconds."""

from __future__ import annotations

import copy
import json
from typing import Any

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from inventory.sitefile.validate import (
    SiteFileError,
    SiteFileParseError,
    load_site_bytes,
    validate_site_document,
)
from tests.inventory.docs import small_site

FUZZ = settings(
    derandomize=True,
    max_examples=150,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)

# Text with what breaks things: controls, NUL, bidi and zero-width characters, lone surrogates.
nasty_text = st.text(alphabet=st.characters(exclude_categories=()), max_size=40) | st.sampled_from(
    ["\x00", "\ud800", "\u202e", "\u200b", "\x1b[2J", "..", "a/b", "X1", ""]
)
numbers = st.one_of(
    st.integers(min_value=-(10**400), max_value=10**400),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0, -1, 1e308, 5, 1200.0000001]),
)
leaves = st.one_of(st.none(), st.booleans(), numbers, nasty_text)
values = st.recursive(
    leaves,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(nasty_text, inner, max_size=4),
    max_leaves=20,
)


def _paths(node: Any, path: tuple = ()) -> list[tuple]:
    found = [path]
    if isinstance(node, dict):
        for key, value in node.items():
            found.extend(_paths(value, (*path, key)))
    elif isinstance(node, list):
        for index, value in enumerate(node):
            found.extend(_paths(value, (*path, index)))
    return found


SITE = small_site()
PATHS = _paths(SITE)[1:]


def _checked(doc: Any) -> None:
    errors = validate_site_document(doc)
    assert isinstance(errors, list)
    assert all(isinstance(e, SiteFileError) for e in errors)


@FUZZ
@given(st.binary(max_size=400))
def test_the_loader_takes_any_bytes(data):
    for name in ("fuzz.json", "fuzz.yaml"):
        try:
            doc = load_site_bytes(data, name=name)
        except SiteFileParseError:
            continue
        _checked(doc)


@FUZZ
@given(st.text(max_size=300))
def test_the_loader_takes_any_text(text):
    for name in ("fuzz.json", "fuzz.yaml"):
        try:
            doc = load_site_bytes(text.encode("utf-8", "surrogatepass"), name=name)
        except SiteFileParseError:
            continue
        _checked(doc)


@FUZZ
@given(values)
def test_the_validator_takes_any_document(doc):
    _checked(doc)
    _checked({"format": "loopkeep.site/1", "site": doc})


@FUZZ
@given(st.lists(st.tuples(st.sampled_from(PATHS), values), min_size=1, max_size=3))
def test_the_validator_takes_a_good_site_with_any_values_put_anywhere(edits):
    doc = copy.deepcopy(SITE)
    for path, value in edits:
        node: Any = doc
        try:
            for token in path[:-1]:
                node = node[token]
            node[path[-1]] = value
        except (KeyError, IndexError, TypeError):
            continue  # an earlier edit changed the shape there
    _checked(doc)
    # the same document through the loader, as a file would bring it
    try:
        text = json.dumps(doc, ensure_ascii=True)
    except (ValueError, TypeError):
        return
    try:
        loaded = load_site_bytes(text.encode(), name="fuzz.json")
    except SiteFileParseError:
        return
    _checked(loaded)
