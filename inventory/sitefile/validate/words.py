"""Words for values and places: the one error type, JSON pointers (RFC 6901) and how a value
is shown in a message, so every layer of the validator speaks alike."""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class SiteFileError:
    """One problem in a site file: where (an RFC 6901 JSON pointer) and what, in plain words."""

    pointer: str
    message: str

    def __str__(self) -> str:
        return f"{self.pointer}: {self.message}"


def kind(value: Any) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true or false"
    if isinstance(value, dict):
        return "an object"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, str):
        return "text"
    if isinstance(value, int | float):
        return "a number"
    return type(value).__name__


def show(value: Any) -> str:
    """A value as a clerk would recognise it in the file."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    if isinstance(value, str):
        return repr(value) if len(value) <= 60 else repr(value[:57] + "...")
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) >= 10**15:
        digits = len(str(abs(value))) if abs(value) < 10**4000 else "thousands of"
        return f"a whole number of {digits} digits"
    if isinstance(value, float) and value.is_integer():
        return str(int(value)) if abs(value) < 1e15 else repr(value)
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, list):
        if len(value) <= 4 and all(isinstance(v, str | int | float) for v in value):
            return "[" + ", ".join(show(v) for v in value) + "]"
        return "a list"
    if isinstance(value, dict):
        return "an object"
    return repr(value)


def listing(values: Iterable[str]) -> str:
    return ", ".join(values)


def pair_text(value: Iterable[str]) -> str:
    return "[" + ", ".join(value) + "]"


def escape(token: Any) -> str:
    return str(token).replace("~", "~0").replace("/", "~1")


def pointer(*tokens: Any) -> str:
    return "".join("/" + escape(t) for t in tokens)


def suggest(key: str, allowed: Iterable[str]) -> str:
    close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def sort_key(error: SiteFileError, rank: dict[str, int]) -> tuple:
    """Errors in document order: list items by index, object fields in ``rank`` (the schema's
    declaration order: ``code`` before ``equipment`` before ``terminals`` ...)."""
    key = []
    for token in error.pointer.split("/")[1:]:
        token = token.replace("~1", "/").replace("~0", "~")
        if token.isdigit():
            key.append((0, int(token), ""))
        else:
            key.append((1, rank.get(token, len(rank)), token))
    return tuple(key)
