"""Reading and checking a site file (format ``loopkeep.site/1``) before anything is written.

Two layers, both pure Python (no Django), both reporting *every* problem with its JSON pointer
(RFC 6901) so a records clerk can go straight to it:

1. Structure, against the JSON Schema shipped beside this module (``schema.json``, draft
   2020-12): required fields, types, ranges, misspelt keys. jsonschema's own messages are
   rewritten into plain words ("must be greater than 0, got -5").
2. Sense: duplicate codes, references to things the file does not declare (equipment, buses,
   terminal owners, CT terminals, switches and their positions, devices, jumpers, wires), and
   values that cannot be physically right (a tap on two equal terminals, an excitation curve
   that does not rise, an unknown wire size, an accuracy string that is not a class ...).

Everything runs in one pass per section with dictionaries and sets, so the cost grows linearly
with the file (the spreadsheet importer pushes 100,000 CTs through here).
"""

from __future__ import annotations

import difflib
import functools
import json
import math
import re
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import yaml
from jsonschema import Draft202012Validator
from jsonschema.exceptions import ValidationError

from inventory.sitefile import gate
from record.operations import OPERATION_COMPANIONS
from siterules.procedure_refs import OPERATIONS, RecordNames, procedure_problems
from trade.accuracy import parse_accuracy
from trade.conductors import conductor_ohm_per_m
from trade.ratio import ratio_setting_error

__all__ = [
    "FORMAT",
    "SCHEMA_PATH",
    "SiteFileError",
    "SiteFileParseError",
    "load_schema",
    "load_site_file",
    "load_site_text",
    "validate_site_document",
]

FORMAT = "loopkeep.site/1"
SCHEMA_PATH = Path(__file__).with_name("schema.json")

# The operations of a procedure step (``OPERATIONS``, the record's one vocabulary,
# ``record.operations``) are in the order of the schema's oneOf branches.
_OPERATION_COMPANIONS = tuple(k for keys in OPERATION_COMPANIONS.values() for k in keys)


@dataclass(frozen=True)
class SiteFileError:
    """One problem in a site file: where (an RFC 6901 JSON pointer) and what, in plain words."""

    pointer: str
    message: str

    def __str__(self) -> str:
        return f"{self.pointer}: {self.message}"


class SiteFileParseError(ValueError):
    """The text is not well-formed JSON or YAML; the message gives the line and column."""


# --------------------------------------------------------------------------------------------
# Loading


class _SiteYamlLoader(yaml.SafeLoader):
    """YAML with the 1.2 core scalars: ``400:5`` stays text (YAML 1.1 reads it as the base-60
    number 24005), ``on``/``off``/``yes``/``no`` stay text (they are plausible switch position
    names) and timestamps stay text (the schema wants ISO 8601 strings)."""


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


def _load_json(text: str, name: str) -> Any:
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise SiteFileParseError(
            f"{name}: not valid JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}"
        ) from exc


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


def load_site_text(text: str, *, name: str = "<input>") -> dict:
    """Parse a site file's text into a dict (not yet validated).

    JSON unless ``name`` ends in ``.yaml``/``.yml`` or the text does not start like a JSON
    object (then YAML, read with YAML 1.2 core scalars). Raises :class:`SiteFileParseError`
    naming the line and column of the first syntax error, or saying that the top level is not
    an object.
    """
    lowered = name.lower()
    if lowered.endswith((".yaml", ".yml")):
        doc = _load_yaml(text, name)
    elif lowered.endswith(".json") or text.lstrip().startswith(("{", "[")):
        doc = _load_json(text, name)
    else:
        doc = _load_yaml(text, name)
    if not isinstance(doc, dict):
        raise SiteFileParseError(
            f"{name}: a site file is one object at the top level (with 'format', 'site', ...), "
            f"not {_kind(doc)}"
        )
    return doc


def load_site_file(path: str | Path) -> dict:
    """Read and parse a site file from disk (UTF-8, with or without the byte-order mark that
    some spreadsheet tools write); see :func:`load_site_text`."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise SiteFileParseError(f"{path}: not UTF-8 text (byte {exc.start})") from exc
    return load_site_text(text, name=str(path))


# --------------------------------------------------------------------------------------------
# Words for values and pointers


def _kind(value: Any) -> str:
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


def _show(value: Any) -> str:
    """A value as a clerk would recognise it in the file."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    if isinstance(value, str):
        return repr(value) if len(value) <= 60 else repr(value[:57] + "...")
    if isinstance(value, float) and value.is_integer():
        return str(int(value)) if abs(value) < 1e15 else repr(value)
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, list):
        if len(value) <= 4 and all(isinstance(v, str | int | float) for v in value):
            return "[" + ", ".join(_show(v) for v in value) + "]"
        return "a list"
    if isinstance(value, dict):
        return "an object"
    return repr(value)


def _names(values: Iterable[str]) -> str:
    return ", ".join(values)


def _pair(value: Iterable[str]) -> str:
    return "[" + ", ".join(value) + "]"


def _escape(token: Any) -> str:
    return str(token).replace("~", "~0").replace("/", "~1")


def _pointer(*tokens: Any) -> str:
    return "".join("/" + _escape(t) for t in tokens)


_TYPE_WORDS = {
    "number": "a number",
    "integer": "a whole number",
    "string": "text",
    "boolean": "true or false",
    "array": "a list",
    "object": "an object",
    "null": "null",
}

# Messages for the schema's patterns (keyed by the pattern text of schema.json's $defs).
_PATTERN_WORDS = {
    r"^[^\s:]+$": "must be a code or name without spaces or ':'",
    r"^[^\s:/]+(/[^\s:/]+)?$": (
        "must be a switch code such as 'TS-101/1' (no spaces or ':', at most one '/')"
    ),
    r"^[^\s:]+:[^\s:]+$": "must be a terminal 'OWNER:NAME' such as 'TB-101:4'",
}


def _suggest(key: str, allowed: Iterable[str]) -> str:
    close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


# --------------------------------------------------------------------------------------------
# Schema layer


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
def _field_rank() -> dict[str, int]:
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


def _schema_errors(doc: dict, text: str | None) -> Iterator[SiteFileError]:
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

    if keyword == "required":
        for name in value:
            if isinstance(instance, dict) and name not in instance:
                yield SiteFileError(_pointer(*path, name), "required field is missing")
    elif keyword == "additionalProperties" and value is False:
        allowed = list(schema.get("properties", {}))
        for key in instance:
            if key not in allowed:
                hint = _suggest(str(key), allowed) or f"; expected one of {_names(allowed)}"
                yield SiteFileError(_pointer(*path, key), f"unknown field{hint}")
    elif keyword == "type":
        yield SiteFileError(
            _pointer(*path), f"must be {_TYPE_WORDS.get(value, value)}, got {_show(instance)}"
        )
    elif keyword == "exclusiveMinimum":
        yield SiteFileError(
            _pointer(*path), f"must be greater than {_show(value)}, got {_show(instance)}"
        )
    elif keyword == "minimum":
        yield SiteFileError(
            _pointer(*path), f"must be at least {_show(value)}, got {_show(instance)}"
        )
    elif keyword == "maximum":
        yield SiteFileError(
            _pointer(*path), f"must be at most {_show(value)}, got {_show(instance)}"
        )
    elif keyword == "exclusiveMaximum":
        yield SiteFileError(
            _pointer(*path), f"must be less than {_show(value)}, got {_show(instance)}"
        )
    elif keyword == "enum":
        yield SiteFileError(
            _pointer(*path),
            f"must be one of {_names(_show(v) for v in value)}, got {_show(instance)}",
        )
    elif keyword == "const":
        yield SiteFileError(_pointer(*path), f"must be {_show(value)}, got {_show(instance)}")
    elif keyword in ("minItems", "maxItems"):
        low, high = schema.get("minItems"), schema.get("maxItems")
        if low is not None and low == high:
            need = f"exactly {low}"
        elif keyword == "minItems":
            need = f"at least {value}"
        else:
            need = f"at most {value}"
        noun = "item" if value == 1 else "items"
        yield SiteFileError(_pointer(*path), f"must hold {need} {noun}, got {len(instance)}")
    elif keyword == "minProperties":
        yield SiteFileError(
            _pointer(*path), f"must hold at least {value} entries, got {len(instance)}"
        )
    elif keyword == "minLength":
        yield SiteFileError(_pointer(*path), "must not be empty")
    elif keyword == "pattern":
        words = _PATTERN_WORDS.get(value, f"must match {value}")
        yield SiteFileError(_pointer(*path), f"{words}, got {_show(instance)}")
    elif keyword == "oneOf" and schema is load_schema()["$defs"]["operation"]:
        yield from _translate_step(error, path, prefix)
    else:
        yield SiteFileError(_pointer(*path), error.message)


def _translate_step(
    error: ValidationError, path: list[Any], prefix: tuple[Any, ...]
) -> Iterator[SiteFileError]:
    """A procedure step failed every operation shape: say what is wrong with the one it is
    meant to be (picked by its operation key), not with all ten."""
    step = error.instance
    if not isinstance(step, dict):
        yield SiteFileError(
            _pointer(*path), f"must be an object naming one operation, got {_show(step)}"
        )
        return
    found = [key for key in step if key in OPERATIONS]
    if len(found) > 1:
        yield SiteFileError(
            _pointer(*path), f"a step holds one operation, this one has {_names(found)}"
        )
        return
    if not found:
        yield SiteFileError(
            _pointer(*path), f"names no operation; a step needs one of {_names(OPERATIONS)}"
        )
        allowed = (*OPERATIONS, *_OPERATION_COMPANIONS)
        for key in step:
            if key not in allowed:
                yield SiteFileError(
                    _pointer(*path, key), f"unknown field{_suggest(str(key), allowed)}"
                )
        return
    branch = OPERATIONS.index(found[0])
    for sub in error.context or ():
        if sub.relative_schema_path and sub.relative_schema_path[0] == branch:
            yield from _translate(sub, prefix)


# --------------------------------------------------------------------------------------------
# Sense layer


def _is_num(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _is_pair(value: Any) -> bool:
    return isinstance(value, list) and len(value) == 2 and all(isinstance(v, str) for v in value)


def _items(doc: dict, section: str) -> Iterator[tuple[int, dict]]:
    items = doc.get(section)
    if isinstance(items, list):
        for index, item in enumerate(items):
            if isinstance(item, dict):
                yield index, item


def _positive(value: Any) -> float | None:
    return value if _is_num(value) and value > 0 else None


def _parse_time(text: str) -> datetime | None:
    try:
        moment = datetime.fromisoformat(text)
    except ValueError:
        return None
    return moment if moment.tzinfo else moment.replace(tzinfo=UTC)


class _SenseChecker:
    """The reference and plausibility checks; tolerant of a structurally broken document
    (anything of the wrong type is skipped here because the schema layer reports it)."""

    def __init__(self, doc: dict) -> None:
        self.doc = doc
        self.errors: list[SiteFileError] = []
        self.wire_size_check = _wire_size_checker()
        self.accuracy_check = _accuracy_checker()
        # The model layer's rule, so the file and the admin accept the same settings.
        self.ratio_check = ratio_setting_error

    def add(self, message: str, *tokens: Any) -> None:
        self.errors.append(SiteFileError(_pointer(*tokens), message))

    # -- codes ---------------------------------------------------------------------------

    def codes(self, section: str, noun: str) -> dict[str, int]:
        """code -> index of its first declaration; later duplicates are errors."""
        seen: dict[str, int] = {}
        for index, item in _items(self.doc, section):
            code = item.get("code")
            if not isinstance(code, str):
                continue
            if code in seen:
                self.add(
                    f"duplicate {noun} code {code!r} (first at {_pointer(section, seen[code])})",
                    section,
                    index,
                    "code",
                )
            else:
                seen[code] = index
        return seen

    def run(self) -> list[SiteFileError]:
        self.buses = self.codes("buses", "bus")
        self.equipment = self.codes("equipment", "equipment")
        self.blocks = self.codes("terminal_blocks", "terminal block")
        self.cts = self.codes("cts", "CT")
        self.devices = self.codes("devices", "device")
        self.switches = self.codes("switches", "switch")
        self.codes("procedures", "procedure")

        # Terminal names of each CT (for OWNER:NAME checks and taps).
        # None when the CT's terminals are unreadable (the schema layer says so): then any
        # name is let through rather than reported against a list that is not there.
        self.ct_terminals: dict[str, dict[str, Any] | None] = {}
        for index, ct in _items(self.doc, "cts"):
            code, terminals = ct.get("code"), ct.get("terminals")
            if isinstance(code, str) and self.cts.get(code) == index:
                self.ct_terminals[code] = terminals if isinstance(terminals, dict) else None

        # Owners other than CTs: devices, equipment, terminal blocks, switch groups.
        self.owners: set[str] = set(self.devices) | set(self.equipment) | set(self.blocks)
        for _, switch in _items(self.doc, "switches"):
            code = switch.get("code")
            if isinstance(code, str):
                self.owners.add(code.split("/", 1)[0])

        self.check_equipment()
        self.check_cts()
        self.check_devices()
        self.check_wires()
        self.check_links_and_grounds()
        self.check_switches()
        self.check_procedures()
        return self.errors

    # -- terminals -----------------------------------------------------------------------

    def terminal(self, value: Any, *tokens: Any) -> None:
        if not isinstance(value, str) or ":" not in value:
            return
        owner, name = value.split(":", 1)
        if owner in self.ct_terminals:
            names = self.ct_terminals[owner]
            if names is not None and name not in names:
                self.add(
                    f"CT {owner!r} has no terminal {name!r} (it has {_names(names) or 'none'})",
                    *tokens,
                )
        elif owner not in self.owners:
            self.add(
                f"unknown owner {owner!r} of terminal {value!r}: not a CT, device, equipment, "
                "terminal block or switch group of this site",
                *tokens,
            )

    def two_ends(self, pair: Any, what: str, *tokens: Any) -> None:
        """Both ends of a two-terminal element (wire, link, contact, jumper) exist and differ."""
        if not isinstance(pair, list):
            return
        for end, value in enumerate(pair[:2]):
            self.terminal(value, *tokens, end)
        if _is_pair(pair) and pair[0] == pair[1]:
            self.add(f"{what} from a terminal to itself ({pair[0]!r})", *tokens, 1)

    # -- sections ------------------------------------------------------------------------

    def check_equipment(self) -> None:
        for index, item in _items(self.doc, "equipment"):
            bus = item.get("bus")
            if isinstance(bus, str) and bus not in self.buses:
                self.add(f"unknown bus {bus!r}", "equipment", index, "bus")

    def check_cts(self) -> None:
        set_phases: dict[tuple[str, str], tuple[str, int]] = {}
        for index, ct in _items(self.doc, "cts"):
            code = ct.get("code")
            where = ("cts", index)
            equipment = ct.get("equipment")
            if isinstance(equipment, str) and equipment not in self.equipment:
                self.add(f"unknown equipment {equipment!r}", *where, "equipment")

            terminals = ct.get("terminals")
            if isinstance(terminals, dict):
                self.winding(ct, terminals, where)

            phase, group = ct.get("phase"), ct.get("set")
            if isinstance(phase, str) and isinstance(group, str) and phase != "N":
                key = (group, phase)
                if key in set_phases:
                    other, other_index = set_phases[key]
                    self.add(
                        f"set {group!r} already has a phase {phase} CT ({other} at "
                        f"{_pointer('cts', other_index)})",
                        *where,
                        "phase",
                    )
                else:
                    set_phases[key] = (str(code), index)

            accuracy = ct.get("accuracy")
            if isinstance(accuracy, str) and accuracy:
                problem = self.accuracy_check(
                    accuracy, _positive(ct.get("rated_burden_va")), _positive(ct.get("knee_v"))
                )
                if problem:
                    self.add(problem, *where, "accuracy")

            self.excitation(ct.get("excitation"), *where, "excitation")

    def winding(self, ct: dict, terminals: dict[str, Any], where: tuple[Any, ...]) -> None:
        """Terminal positions, the tap in use and the tap history of one CT."""
        at_position: dict[float, str] = {}
        for name, position in terminals.items():
            if not _is_num(position):
                continue
            if position in at_position:
                self.add(
                    f"position {_show(position)} is also that of {at_position[position]}; "
                    "two terminals cannot sit at the same point of the winding",
                    *where,
                    "terminals",
                    name,
                )
            else:
                at_position[position] = name
        self.tap(ct.get("in_use"), terminals, *where, "in_use")
        self.tap_changes(ct.get("tap_changes"), terminals, *where)

    def tap(self, tap: Any, terminals: dict[str, Any], *tokens: Any) -> bool:
        """Check a pair of CT terminal names; True when it is a usable tap."""
        if not _is_pair(tap):
            return False
        good = True
        for end, name in enumerate(tap):
            if name not in terminals:
                self.add(
                    f"the CT has no terminal {name!r} (it has {_names(terminals) or 'none'})",
                    *tokens,
                    end,
                )
                good = False
        if tap[0] == tap[1]:
            self.add(
                f"both terminals are {tap[0]!r}; a tap needs two different terminals",
                *tokens,
                1,
            )
            good = False
        return good

    def excitation(self, points: Any, *tokens: Any) -> None:
        if not isinstance(points, list):
            return
        previous: tuple[int, Any, Any] | None = None
        for index, point in enumerate(points):
            if not (isinstance(point, list) and len(point) == 2 and all(map(_is_num, point))):
                previous = None
                continue
            current_a, volts = point
            if previous is not None:
                last, last_a, last_v = previous
                if current_a <= last_a:
                    self.add(
                        f"exciting current must rise from point to point: {_show(current_a)} "
                        f"is not above {_show(last_a)} of point {last}",
                        *tokens,
                        index,
                        0,
                    )
                if volts <= last_v:
                    self.add(
                        f"secondary voltage must rise from point to point: {_show(volts)} "
                        f"is not above {_show(last_v)} of point {last}",
                        *tokens,
                        index,
                        1,
                    )
            previous = (index, current_a, volts)

    def tap_changes(self, changes: Any, terminals: dict[str, Any], *where: Any) -> None:
        # An in_use that differs from the last change's "to" is not an error: it is a tap
        # change made now, and the importer records it as an event. Taps are ordered pairs
        # (the first terminal is where the current leaves), so a swap is a change too.
        if not isinstance(changes, list):
            return
        last_to: tuple[int, list[str]] | None = None
        last_at: tuple[int, datetime] | None = None
        for index, change in enumerate(changes):
            if not isinstance(change, dict):
                last_to = None
                continue
            here = (*where, "tap_changes", index)
            before, after = change.get("from"), change.get("to")
            good_from = self.tap(before, terminals, *here, "from")
            good_to = self.tap(after, terminals, *here, "to")
            if good_from and good_to and list(before) == list(after):
                self.add(f"the same tap as from ({_pair(before)}); not a change", *here, "to")
            if good_from and last_to is not None and list(before) != list(last_to[1]):
                self.add(
                    f"{_pair(before)} does not follow the previous change, which left "
                    f"{_pair(last_to[1])}",
                    *here,
                    "from",
                )
            last_to = (index, after) if good_to else None

            at = change.get("at")
            if isinstance(at, str) and at:
                moment = _parse_time(at)
                if moment is None:
                    self.add(
                        f"must be a date and time like '2024-03-05T10:00:00Z', got {_show(at)}",
                        *here,
                        "at",
                    )
                elif last_at is not None and moment < last_at[1]:
                    self.add(
                        f"earlier than change {last_at[0]}; list tap changes oldest first",
                        *here,
                        "at",
                    )
                    last_at = (index, moment)
                else:
                    last_at = (index, moment)

    def check_devices(self) -> None:
        for index, device in _items(self.doc, "devices"):
            where = ("devices", index)
            ratio = device.get("ratio_setting")
            if isinstance(ratio, str) and ratio:
                problem = self.ratio_check(ratio)
                if problem:
                    self.add(problem, *where, "ratio_setting")
            self.unique_names(device.get("inputs"), "input", *where, "inputs")
            self.unique_names(device.get("outputs"), "output", *where, "outputs")

            inputs = device.get("inputs")
            for number, item in enumerate(inputs if isinstance(inputs, list) else ()):
                if not isinstance(item, dict):
                    continue
                here = (*where, "inputs", number)
                self.terminal(item.get("from"), *here, "from")
                self.terminal(item.get("to"), *here, "to")
                if isinstance(item.get("from"), str) and item.get("from") == item.get("to"):
                    self.add(f"an input from a terminal to itself ({item['to']!r})", *here, "to")
                has_va, has_ohm = "burden_va" in item, "burden_ohm" in item
                if has_va and has_ohm:
                    self.add("give burden_va (with pf) or burden_ohm, not both", *here)
                elif not has_va and not has_ohm:
                    self.add(
                        "no burden: give burden_va (VA at rated current, with pf) or "
                        "burden_ohm [R, X]",
                        *here,
                    )
                if has_ohm and "pf" in item and not has_va:
                    self.add(
                        "pf goes with burden_va; burden_ohm already gives R and X", *here, "pf"
                    )
                ohm = item.get("burden_ohm")
                if (
                    isinstance(ohm, list)
                    and len(ohm) == 2
                    and all(map(_is_num, ohm))
                    and ohm[0] == 0
                    and ohm[1] == 0
                ):
                    self.add("burden_ohm is zero; use a link for no impedance", *here, "burden_ohm")

            outputs = device.get("outputs")
            for number, item in enumerate(outputs if isinstance(outputs, list) else ()):
                if not isinstance(item, dict):
                    continue
                here = (*where, "outputs", number)
                self.terminal(item.get("terminal"), *here, "terminal")
                self.terminal(item.get("target"), *here, "target")
                if isinstance(item.get("target"), str) and item.get("target") == item.get(
                    "terminal"
                ):
                    self.add("an output cannot target its own terminal", *here, "target")

    def unique_names(self, items: Any, noun: str, *tokens: Any) -> None:
        if not isinstance(items, list):
            return
        seen: dict[str, int] = {}
        for index, item in enumerate(items):
            name = item.get("name") if isinstance(item, dict) else None
            if not isinstance(name, str):
                continue
            if name in seen:
                self.add(
                    f"duplicate {noun} name {name!r} (first at {_pointer(*tokens, seen[name])})",
                    *tokens,
                    index,
                    "name",
                )
            else:
                seen[name] = index

    def check_wires(self) -> None:
        for index, wire in _items(self.doc, "wires"):
            here = ("wires", index)
            start, end = wire.get("from"), wire.get("to")
            self.terminal(start, *here, "from")
            self.terminal(end, *here, "to")
            if isinstance(start, str) and isinstance(end, str) and start == end:
                self.add(f"a wire from a terminal to itself ({end!r})", *here, "to")

            has_r = "r_ohm" in wire
            has_size = "size" in wire
            has_m, has_ft = "length_m" in wire, "length_ft" in wire
            if has_r and (has_size or has_m or has_ft or "material" in wire):
                self.add("give r_ohm alone, or size with length_m or length_ft; not both", *here)
            elif not has_r:
                if not has_size and not (has_m or has_ft):
                    self.add("no resistance: give size with length_m or length_ft, or r_ohm", *here)
                elif not has_size:
                    self.add("length given without a size (e.g. '10AWG', '4mm2')", *here)
                elif not (has_m or has_ft):
                    self.add("size given without length_m or length_ft", *here)
            if has_m and has_ft:
                self.add("give length_m or length_ft, not both", *here)

            size = wire.get("size")
            if isinstance(size, str) and size:
                material = wire.get("material", "cu")
                problem = self.wire_size_check(size, material if material in ("cu", "al") else "cu")
                if problem:
                    self.add(problem, *here, "size")

    def check_links_and_grounds(self) -> None:
        links = self.doc.get("links")
        for index, link in enumerate(links if isinstance(links, list) else ()):
            self.two_ends(link, "a link", "links", index)
        grounds = self.doc.get("grounds")
        seen: dict[str, int] = {}
        for index, ground in enumerate(grounds if isinstance(grounds, list) else ()):
            self.terminal(ground, "grounds", index)
            if isinstance(ground, str):
                if ground in seen:
                    self.add(
                        f"{ground!r} is listed twice (first at /grounds/{seen[ground]})",
                        "grounds",
                        index,
                    )
                else:
                    seen[ground] = index

    def check_switches(self) -> None:
        for index, switch in _items(self.doc, "switches"):
            here = ("switches", index)
            positions = switch.get("positions")
            known: list[str] = []
            for number, position in enumerate(positions if isinstance(positions, list) else ()):
                if not isinstance(position, str):
                    continue
                if position in known:
                    self.add(f"duplicate position {position!r}", *here, "positions", number)
                else:
                    known.append(position)
            normal = switch.get("normal")
            if isinstance(normal, str) and isinstance(positions, list) and normal not in known:
                self.add(
                    f"{normal!r} is not one of the positions ({_names(known)})", *here, "normal"
                )
            contacts = switch.get("contacts")
            for number, contact in enumerate(contacts if isinstance(contacts, list) else ()):
                if not isinstance(contact, dict):
                    continue
                self.two_ends(
                    contact.get("between"), "a contact", *here, "contacts", number, "between"
                )
                closed_in = contact.get("closed_in")
                listed: set[str] = set()
                for k, position in enumerate(closed_in if isinstance(closed_in, list) else ()):
                    if not isinstance(position, str) or not isinstance(positions, list):
                        continue
                    ptr = (*here, "contacts", number, "closed_in", k)
                    if position not in known:
                        self.add(
                            f"{position!r} is not one of the positions ({_names(known)})", *ptr
                        )
                    elif position in listed:
                        self.add(f"position {position!r} is listed twice", *ptr)
                    listed.add(position)

    def check_procedures(self) -> None:
        """Every procedure against the one rule of what a step may name
        (``siterules.procedure_refs``, which the engine applies too)."""
        names = record_names(self.doc)
        for index, procedure in _items(self.doc, "procedures"):
            here = ("procedures", index)
            devices = procedure.get("devices")
            steps = procedure.get("steps")
            for problem in procedure_problems(
                names,
                steps if isinstance(steps, list) else [],
                devices if isinstance(devices, list) else [],
                prefix=here,
                check_shape=False,
            ):
                self.add(problem.message, *here, *problem.at)


def record_names(doc: dict) -> RecordNames:
    """The names a procedure of ``doc`` may refer to: every terminal an element of the record
    touches (as the engine's netlist indexes them), switches with their positions, devices,
    equipment, and the ends of every wire and link."""
    terminals: set[str] = set()

    def term(value: Any) -> None:
        if isinstance(value, str):
            terminals.add(value)

    def ends(pair: Any) -> frozenset[str] | None:
        if _is_pair(pair) and all(isinstance(t, str) for t in pair) and pair[0] != pair[1]:
            return frozenset(pair)
        return None

    for _, ct in _items(doc, "cts"):
        code, positions = ct.get("code"), ct.get("terminals")
        if isinstance(code, str) and isinstance(positions, dict):
            terminals.update(f"{code}:{name}" for name in positions)
    for _, device in _items(doc, "devices"):
        for key, fields in (("inputs", ("from", "to")), ("outputs", ("terminal", "target"))):
            items = device.get(key)
            for item in items if isinstance(items, list) else ():
                if isinstance(item, dict):
                    for field in fields:
                        term(item.get(field))
    wires: set[frozenset[str]] = set()
    for _, wire in _items(doc, "wires"):
        term(wire.get("from"))
        term(wire.get("to"))
        pair = ends([wire.get("from"), wire.get("to")])
        if pair:
            wires.add(pair)
    links: set[frozenset[str]] = set()
    raw_links = doc.get("links")
    for link in raw_links if isinstance(raw_links, list) else ():
        if isinstance(link, list):
            for value in link:
                term(value)
            pair = ends(link)
            if pair:
                links.add(pair)
    grounds = doc.get("grounds")
    for ground in grounds if isinstance(grounds, list) else ():
        term(ground)
    switches: dict[str, tuple[str, ...]] = {}
    for _, switch in _items(doc, "switches"):
        code, positions = switch.get("code"), switch.get("positions")
        if isinstance(code, str) and code not in switches:
            switches[code] = tuple(
                p for p in (positions if isinstance(positions, list) else ()) if isinstance(p, str)
            )
        contacts = switch.get("contacts")
        for contact in contacts if isinstance(contacts, list) else ():
            between = contact.get("between") if isinstance(contact, dict) else None
            for value in between if isinstance(between, list) else ():
                term(value)
    codes = {
        section: frozenset(
            item["code"] for _, item in _items(doc, section) if isinstance(item.get("code"), str)
        )
        for section in ("devices", "equipment")
    }
    return RecordNames(
        terminals=frozenset(terminals),
        switches=switches,
        devices=codes["devices"],
        equipment=codes["equipment"],
        wires=frozenset(wires),
        links=frozenset(links),
    )


def _wire_size_checker() -> Callable[[str, str], str | None]:
    """A cached check of (size, material) against the conductor table: None when known,
    else the table's own message."""

    @functools.cache
    def check(size: str, material: str) -> str | None:
        try:
            conductor_ohm_per_m(size, material)
        except ValueError as exc:
            return str(exc)
        return None

    return check


def _accuracy_checker() -> Callable[[str, float | None, float | None], str | None]:
    """A cached check of an accuracy string with the CT's rated burden and knee point (a
    '5P20 15VA' class must agree with rated_burden_va): None when it is a class, else why not."""

    @functools.cache
    def check(text: str, rated_burden_va: float | None, knee_v: float | None) -> str | None:
        try:
            parse_accuracy(text, rated_burden_va=rated_burden_va, knee_v=knee_v)
        except ValueError as exc:
            return str(exc)
        return None

    return check


# --------------------------------------------------------------------------------------------
# Entry point


def _sort_key(error: SiteFileError) -> tuple:
    rank = _field_rank()
    key = []
    for token in error.pointer.split("/")[1:]:
        token = token.replace("~1", "/").replace("~0", "~")
        if token.isdigit():
            key.append((0, int(token), ""))
        else:
            key.append((1, rank.get(token, len(rank)), token))
    return tuple(key)


def _non_finite(node: Any, pointer: str) -> Iterator[SiteFileError]:
    """NaN and infinity parse from JSON (``NaN``, ``Infinity``) and YAML (``.nan``, ``.inf``)
    but are never a length, a resistance or a fault level."""
    if isinstance(node, float) and not math.isfinite(node):
        yield SiteFileError(pointer, f"must be a finite number, got {node!r}")
    elif isinstance(node, dict):
        for key, value in node.items():
            yield from _non_finite(value, f"{pointer}/{_escape(str(key))}")
    elif isinstance(node, list):
        for index, value in enumerate(node):
            yield from _non_finite(value, f"{pointer}/{index}")


def validate_site_document(doc: Any) -> list[SiteFileError]:
    """Every problem in a parsed site file, structure (JSON Schema) and sense (references,
    duplicates, physically impossible values), in document order. An empty list means the
    document may be imported.

    Wire sizes are checked against ``trade.conductors`` and accuracy strings against
    ``trade.accuracy.parse_accuracy`` (IEEE C57.13 / IEC 61869-2 classes), the same tables the
    engine computes with, so the importer accepts exactly what the engine can compute with.
    """
    if not isinstance(doc, dict):
        return [SiteFileError("", f"a site file must be an object, got {_kind(doc)}")]
    # One C-speed dump finds NaN and infinity in a good document; the walk names where.
    text = gate.plain_json(doc)
    errors = [] if text is not None else list(_non_finite(doc, ""))
    errors.extend(_schema_errors(doc, text))
    errors.extend(_SenseChecker(doc).run())
    unique = list(dict.fromkeys(errors))
    unique.sort(key=_sort_key)
    return unique
