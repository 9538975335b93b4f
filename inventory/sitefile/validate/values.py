"""The values layer: what no field of a site file may hold, wherever it is, checked before the
schema because the rest of the validator, the database and the engine assume it.

- only JSON's own types (a YAML ``!!binary``, ``!!set`` or ``!!timestamp`` is not one) and text
  keys;
- no NaN or infinity (JSON's ``NaN``, YAML's ``.inf``): never a length, a resistance or a fault
  level;
- no NUL character (PostgreSQL's text refuses it) and no lone UTF-16 surrogate such as
  ``\\ud800`` (it cannot be written as UTF-8, so the database driver refuses it);
- no nesting deeper than :data:`MAX_DEPTH` (a site file is at most six levels deep).

A good document costs one JSON dump (which the schema gate needs anyway) and one search of it;
only a document that fails them is walked to name the pointers.
"""

from __future__ import annotations

import math
import re
from typing import Any

from inventory.sitefile.validate.words import SiteFileError, escape, kind

# The deepest place of a site file is /cts/N/tap_changes/N/from/N (six containers); twice that
# leaves room and still keeps every walk of a document shallow.
MAX_DEPTH = 12

# In ``json.dumps(..., ensure_ascii=True)`` text: an escaped NUL, or a surrogate escape that is
# not half of a pair. A backslash-escaped backslash before such letters matches too; the walk
# then finds nothing, which is only slower.
_SUSPECT = re.compile(
    r"\\u0000"
    r"|\\ud[89ab][0-9a-f]{2}(?!\\ud[c-f][0-9a-f]{2})"
    r"|(?<!\\ud[89ab][0-9a-f]{2})\\ud[c-f][0-9a-f]{2}"
)
_SURROGATE = re.compile("[\ud800-\udfff]")


def needs_walk(text: str | None) -> bool:
    """Whether a document whose plain JSON is ``text`` (None: it has none) may hold a value
    this layer refuses."""
    if text is None:
        return True
    # Every suspect is the escape of NUL or of a surrogate (\u0000, \udXXX): two substring
    # searches say "none" for most documents much quicker than the pattern.
    if "\\u0000" not in text and "\\ud" not in text:
        return False
    return _SUSPECT.search(text) is not None


def _text_problem(value: str) -> str | None:
    if "\x00" in value:
        return "holds a NUL character (\\u0000), which no field may hold"
    found = _SURROGATE.search(value)
    if found:
        return (
            f"holds a lone UTF-16 surrogate (\\u{ord(found.group()):04x}), which is not a "
            "character; the text was damaged on the way"
        )
    return None


def value_errors(doc: Any) -> tuple[list[SiteFileError], bool]:
    """Every value of ``doc`` this layer refuses, with its pointer, and whether any of them
    makes the document unreadable for the other layers (a type JSON does not have, a key that
    is not text, nesting too deep)."""
    errors: list[SiteFileError] = []
    unreadable = False

    def walk(node: Any, path: str, depth: int) -> None:
        nonlocal unreadable
        if isinstance(node, str):
            problem = _text_problem(node)
            if problem:
                errors.append(SiteFileError(path, problem))
        elif isinstance(node, bool) or node is None or isinstance(node, int):
            return
        elif isinstance(node, float):
            if not math.isfinite(node):
                errors.append(SiteFileError(path, f"must be a finite number, got {node!r}"))
        elif isinstance(node, dict | list):
            if depth >= MAX_DEPTH:
                errors.append(
                    SiteFileError(
                        path,
                        f"nested more than {MAX_DEPTH} levels deep; no field of a site file is",
                    )
                )
                unreadable = True
                return
            if isinstance(node, list):
                for index, value in enumerate(node):
                    walk(value, f"{path}/{index}", depth + 1)
                return
            for key, value in node.items():
                if not isinstance(key, str):
                    errors.append(SiteFileError(path, f"a key must be text, got {kind(key)}"))
                    unreadable = True
                    continue
                here = f"{path}/{escape(key)}"
                problem = _text_problem(key)
                if problem:
                    errors.append(SiteFileError(here, f"the key {problem}"))
                walk(value, here, depth + 1)
        else:
            errors.append(
                SiteFileError(
                    path, f"{type(node).__name__} is not a JSON value (text, number, list ...)"
                )
            )
            unreadable = True

    walk(doc, "", 0)
    return errors, unreadable
