"""Reading a site file: the one place that turns bytes into a document, for ``import_site``,
the API's ``sites/import`` and the commands that take ``--file``.

A site file comes from people and from other programs, so the reader assumes nothing of it:

- only a regular file is read (never ``/dev/zero``, a pipe or a folder), and never more than
  ``max_bytes`` (``SITE_FILE_MAX_BYTES`` in the settings; the largest generated site, 329 CTs,
  is 0.6 MB as indented JSON, the demo sites 24 and 56 KB);
- UTF-8 only (a leading byte-order mark is allowed: some spreadsheet tools write one);
- a key given twice in one object is an error (JSON and YAML would silently keep the last);
- YAML aliases are refused: a site file never needs them, and a few kilobytes of nested
  aliases expand to gigabytes (the "billion laughs"); an alias that refers to itself is the
  same refusal;
- nesting deeper than the parser's recursion limit, and integers with more digits than Python
  converts (4,300), are errors, not tracebacks.

Every refusal is a :class:`SiteFileParseError` whose message says where (line and column, or
the JSON pointer) and what. Values (numbers out of range, NUL, lone surrogates, nesting deeper
than a site file has) are the validator's business (``values.py``), so a document that did not
come from a file (the API, a spreadsheet) meets the same checks.
"""

from __future__ import annotations

import itertools
import json
import os
import re
import stat
from collections.abc import Callable, Generator, Iterator
from pathlib import Path
from typing import Any

import yaml

from inventory.sitefile.validate.values import MAX_DEPTH
from inventory.sitefile.validate.words import SiteFileError, escape, kind

# A few megabytes above the largest real site (see the module docstring); the settings'
# SITE_FILE_MAX_BYTES overrides it for the commands and the API.
DEFAULT_MAX_BYTES = 4 * 1024 * 1024

# Duplicate keys listed in one refusal at most; the count of the rest follows.
_MAX_LISTED = 20


class SiteFileParseError(ValueError):
    """The input is not a readable site file (too big, not a regular file, not UTF-8, not
    well-formed JSON or YAML, a key given twice, a YAML alias); the message says where."""

    def __init__(self, message: str, errors: list[SiteFileError] | None = None) -> None:
        super().__init__(message)
        self.errors = errors or []


# --------------------------------------------------------------------------------------------
# Duplicate keys: both parsers build objects as _Object, which remembers a key given twice;
# the pointers are found after the parse (only when one was seen).


class _Object(dict):
    """A JSON/YAML object that remembers the keys it was given more than once."""

    __slots__ = ("repeated",)

    def __init__(self, *args: Any) -> None:
        super().__init__(*args)
        self.repeated: list[Any] = []


def _object_from_pairs(pairs: list[tuple[str, Any]]) -> dict:
    obj = _Object(pairs)
    if len(obj) != len(pairs):
        seen: set[str] = set()
        for key, _ in pairs:
            if key in seen:
                obj.repeated.append(key)
            seen.add(key)
    return obj


def _json_objects() -> tuple[Callable[[list[tuple[str, Any]]], dict], list[bool]]:
    """An ``object_pairs_hook`` for one parse that builds plain dicts (quicker) while no key
    is given twice, and a flag it sets when one is (then that object remembers it)."""
    repeated = [False]

    def build(pairs: list[tuple[str, Any]]) -> dict:
        obj = dict(pairs)
        if len(obj) == len(pairs):
            return obj
        repeated[0] = True
        return _object_from_pairs(pairs)

    return build, repeated


def _repeated_keys(node: Any, path: str = "") -> Iterator[SiteFileError]:
    if isinstance(node, dict):
        for key in getattr(node, "repeated", ()):
            yield SiteFileError(
                f"{path}/{escape(key)}",
                "this key is given twice in the same object (which one is meant?)",
            )
        for key, value in node.items():
            yield from _repeated_keys(value, f"{path}/{escape(key)}")
    elif isinstance(node, list):
        for index, value in enumerate(node):
            yield from _repeated_keys(value, f"{path}/{index}")


def _refuse_repeated(doc: Any, name: str) -> None:
    found = list(_repeated_keys(doc))
    if found:
        shown = "\n".join(str(e) for e in found[:_MAX_LISTED])
        more = f"\n... and {len(found) - _MAX_LISTED} more" if len(found) > _MAX_LISTED else ""
        raise SiteFileParseError(
            f"{name}: {len(found)} key(s) given twice:\n{shown}{more}", errors=found
        )


# --------------------------------------------------------------------------------------------
# YAML


class _SiteYamlLoader(yaml.SafeLoader):
    """YAML with the 1.2 core scalars: ``400:5`` stays text (YAML 1.1 reads it as the base-60
    number 24005), ``on``/``off``/``yes``/``no`` stay text (they are plausible switch position
    names) and timestamps stay text (the schema wants ISO 8601 strings). Aliases are refused
    and mappings remember repeated keys."""

    def compose_node(self, parent: Any, index: Any) -> Any:
        if self.check_event(yaml.AliasEvent):
            event = self.peek_event()
            raise yaml.composer.ComposerError(
                None,
                None,
                f"YAML aliases (*{event.anchor}) are not accepted in a site file; "
                "write the value out",
                event.start_mark,
            )
        return super().compose_node(parent, index)

    def construct_yaml_map(self, node: Any) -> Generator[dict, None, None]:
        data = _Object()
        yield data
        if not isinstance(node, yaml.MappingNode):
            return
        self.flatten_mapping(node)
        for key_node, value_node in node.value:
            key = self.construct_object(key_node, deep=True)
            if not isinstance(key, str):
                raise yaml.constructor.ConstructorError(
                    None,
                    None,
                    f"a key must be text, got {kind(key)}",
                    key_node.start_mark,
                )
            if key in data:
                data.repeated.append(key)
            data[key] = self.construct_object(value_node, deep=True)


_SiteYamlLoader.add_constructor("tag:yaml.org,2002:map", _SiteYamlLoader.construct_yaml_map)
_SiteYamlLoader.yaml_implicit_resolvers = {
    first: [
        (tag, regexp)
        for tag, regexp in resolvers
        if tag
        not in (
            "tag:yaml.org,2002:bool",
            "tag:yaml.org,2002:int",
            "tag:yaml.org,2002:float",
            "tag:yaml.org,2002:timestamp",
        )
    ]
    for first, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()
}
_SiteYamlLoader.add_implicit_resolver(
    "tag:yaml.org,2002:bool", re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$"), list("tTfF")
)
_SiteYamlLoader.add_implicit_resolver(
    "tag:yaml.org,2002:int", re.compile(r"^[-+]?[0-9]+$"), list("-+0123456789")
)
_SiteYamlLoader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(
        r"^(?:[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?"
        r"|[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN))$"
    ),
    list("-+0123456789."),
)

_TOO_DEEP = "nested too deeply (a site file is a few levels deep)"

# Quoted strings (JSON's and YAML's two kinds, written as unrolled loops so the search stays
# linear and fast), and brackets.
_QUOTED = re.compile(r'"[^"\\\n]*(?:\\.[^"\\\n]*)*"|\'[^\'\n]*(?:\'\'[^\'\n]*)*\'')
_BRACKET = re.compile(r"[\[\]{}]")
_STEP = {"[": 1, "{": 1, "]": -1, "}": -1}
_PAIR = re.compile(r"\[\]|\{\}")


def _refuse_deep_brackets(text: str, name: str) -> None:
    """Refuse brackets nested deeper than a site file's :data:`MAX_DEPTH` before parsing: the
    YAML scanner looks ahead over every open flow bracket (quadratic in the depth) and both
    parsers recurse once per level. Brackets inside quoted strings do not count; in YAML's plain
    text a bracket can only make this stricter. One pass at C speed (about 0.1 s for 3 MB)."""
    brackets = _BRACKET.findall(_QUOTED.sub("", text))
    # Quick answer for the usual file: taking out the innermost pairs ``[]``/``{}`` once per
    # level empties well-nested brackets in as many rounds as they are deep.
    left = "".join(brackets)
    for _ in range(MAX_DEPTH):
        left = _PAIR.sub("", left)
    if not left:
        return
    if max(itertools.accumulate(map(_STEP.__getitem__, brackets)), default=0) <= MAX_DEPTH:
        return
    raise SiteFileParseError(
        f"{name}: not a site file: {_TOO_DEEP}: brackets open more than {MAX_DEPTH} levels deep"
    )


def _load_json(text: str, name: str) -> tuple[Any, bool]:
    """The document, and whether a key was given twice in one of its objects."""
    build, repeated = _json_objects()
    try:
        return json.loads(text, object_pairs_hook=build), repeated[0]
    except json.JSONDecodeError as exc:
        raise SiteFileParseError(
            f"{name}: not valid JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}"
        ) from exc
    except RecursionError as exc:
        raise SiteFileParseError(f"{name}: not a site file: {_TOO_DEEP}") from exc
    except ValueError as exc:  # an integer beyond Python's 4,300-digit conversion limit
        raise SiteFileParseError(f"{name}: not a site file: a number is too long ({exc})") from exc


def _load_yaml(text: str, name: str) -> Any:
    try:
        return yaml.load(text, Loader=_SiteYamlLoader)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        what = exc.problem or exc.context or "malformed"
        raise SiteFileParseError(f"{name}: not valid YAML{where}: {what}") from exc
    except yaml.YAMLError as exc:
        raise SiteFileParseError(f"{name}: not valid YAML: {exc}") from exc
    except RecursionError as exc:
        raise SiteFileParseError(f"{name}: not a site file: {_TOO_DEEP}") from exc
    except ValueError as exc:  # an integer beyond Python's 4,300-digit conversion limit
        raise SiteFileParseError(f"{name}: not a site file: a number is too long ({exc})") from exc


def load_site_text(text: str, *, name: str = "<input>") -> dict:
    """Parse a site file's text into a dict (not yet validated).

    JSON unless ``name`` ends in ``.yaml``/``.yml`` or the text does not start like a JSON
    object (then YAML, read with YAML 1.2 core scalars). Raises :class:`SiteFileParseError`
    naming the line and column of the first syntax error, the pointers of keys given twice, or
    saying that the top level is not an object.
    """
    _refuse_deep_brackets(text, name)
    lowered = name.lower()
    repeated = True  # unknown: look
    if lowered.endswith((".yaml", ".yml")):
        doc = _load_yaml(text, name)
    elif lowered.endswith(".json") or text.lstrip().startswith(("{", "[")):
        doc, repeated = _load_json(text, name)
    else:
        doc = _load_yaml(text, name)
    if not isinstance(doc, dict):
        raise SiteFileParseError(
            f"{name}: a site file is one object at the top level (with 'format', 'site', ...), "
            f"not {kind(doc)}"
        )
    if repeated:
        _refuse_repeated(doc, name)
    return doc


def _size_words(size: int) -> str:
    return f"{size / 1_048_576:.1f} MB" if size >= 1_048_576 else f"{size:,} bytes"


def load_site_bytes(data: bytes, *, name: str = "<input>", max_bytes: int | None = None) -> dict:
    """Decode (UTF-8, with or without a byte-order mark) and parse a site file's bytes; see
    :func:`load_site_text`. Refuses more than ``max_bytes``."""
    limit = DEFAULT_MAX_BYTES if max_bytes is None else max_bytes
    if len(data) > limit:
        raise SiteFileParseError(
            f"{name}: larger than the {_size_words(limit)} a site file may have "
            "(SITE_FILE_MAX_BYTES)"
        )
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise SiteFileParseError(f"{name}: not UTF-8 text (byte {exc.start})") from exc
    return load_site_text(text, name=name)


def load_site_file(path: str | Path, *, max_bytes: int | None = None) -> dict:
    """Read and parse a site file from disk: a regular file of at most ``max_bytes`` (default
    :data:`DEFAULT_MAX_BYTES`), UTF-8; see :func:`load_site_text`. Raises
    :class:`SiteFileParseError` (``OSError`` only for a file that cannot be opened)."""
    path = Path(path)
    limit = DEFAULT_MAX_BYTES if max_bytes is None else max_bytes
    # stat before open: opening a pipe would wait for a writer, reading /dev/zero never ends.
    if not stat.S_ISREG(os.stat(path).st_mode):
        raise SiteFileParseError(f"{path}: not a regular file")
    with open(path, "rb") as stream:
        info = os.fstat(stream.fileno())
        if not stat.S_ISREG(info.st_mode):  # replaced between the stat and the open
            raise SiteFileParseError(f"{path}: not a regular file")
        if info.st_size > limit:
            raise SiteFileParseError(
                f"{path}: {_size_words(info.st_size)}, larger than the {_size_words(limit)} "
                "a site file may have (SITE_FILE_MAX_BYTES)"
            )
        data = stream.read(limit + 1)
    return load_site_bytes(data, name=str(path), max_bytes=limit)
