"""What the steps of a procedure may name: the one rule, used at import and by the engine.

The site-file validator (``inventory.sitefile.validate``) refuses a procedure that breaks it,
with the JSON pointer of the step; the engine (``analysis.engine.procedure``) applies the same
rule before it simulates anything, so a procedure that was imported is one the engine can
check, and a procedure the engine cannot check (an unsaved one, or one stored before this
rule) is refused with the same words.

A step may name only what the record has:

- ``set``: a switch of the site and one of its positions;
- ``add_jumper``: two different terminals of the record (a terminal something is wired,
  linked, switched or connected to: a jumper to a terminal nothing touches is a typo, and it
  would short nothing); its ``id`` (``J<step number>`` when left out) must not be a jumper
  that is already in place;
- ``remove_jumper``: a jumper that an earlier step put in place and no step has taken away;
- ``lift`` / ``land``: the two ends of a wire or of a link (slide links, bars and shorting
  bars are links, design.md); a lift of what is already lifted, or a land of what is not
  lifted, is refused too (it would do nothing, so the procedure does not say what its author
  thinks it says);
- ``remove_device`` / ``insert_device``: a device of the site; ``deenergize`` / ``energize``:
  equipment of the site.

Pure Python, importing nothing of the project but the typed record's operation vocabulary
(``record.operations``), so both ``inventory`` and ``analysis.engine`` may use it.
"""

from __future__ import annotations

import difflib
from collections.abc import Callable, Collection, Iterable, Mapping
from dataclasses import dataclass
from typing import Any

from record.operations import OPERATION_KEYS

__all__ = [
    "OPERATIONS",
    "Problem",
    "RecordNames",
    "default_jumper_id",
    "pointer",
    "procedure_problems",
]

Token = str | int


@dataclass(frozen=True)
class RecordNames:
    """The names a procedure may refer to, taken from one site's record.

    ``wires`` and ``links`` hold the two ends of each wire and link (as frozensets)."""

    terminals: frozenset[str]
    switches: Mapping[str, tuple[str, ...]]
    devices: frozenset[str]
    equipment: frozenset[str]
    wires: frozenset[frozenset[str]]
    links: frozenset[frozenset[str]]


@dataclass(frozen=True)
class Problem:
    """One thing wrong in a procedure: ``at`` are the JSON pointer tokens under the procedure
    (``("steps", 3, "lift")``), ``step`` the index of the step (None for the device list)."""

    at: tuple[Token, ...]
    message: str
    step: int | None = None

    def pointer(self, *prefix: Token) -> str:
        """The RFC 6901 pointer of the problem, under ``prefix`` (e.g. ``"procedures", 2``)."""
        return pointer(*prefix, *self.at)

    def __str__(self) -> str:
        return f"{self.pointer()}: {self.message}"


def pointer(*tokens: Token) -> str:
    """An RFC 6901 JSON pointer from its tokens."""
    return "".join("/" + str(t).replace("~", "~0").replace("/", "~1") for t in tokens)


def default_jumper_id(step_index: int) -> str:
    """The id of a jumper added without one: ``J`` and the step's number (1-based)."""
    return f"J{step_index + 1}"


# The operations, in design.md's order: the typed record's one vocabulary.
OPERATIONS = OPERATION_KEYS


def nearest(value: str, names: Iterable[str], n: int = 3, cutoff: float = 0.6) -> list[str]:
    """The ``n`` names most like ``value`` (difflib's similarity ratio at least ``cutoff``),
    most similar first and, among equally similar ones, in alphabetical order."""
    scored = []
    matcher = difflib.SequenceMatcher(b=value)
    for name in set(names):
        matcher.set_seq1(name)
        if matcher.real_quick_ratio() >= cutoff and matcher.quick_ratio() >= cutoff:
            ratio = matcher.ratio()
            if ratio >= cutoff:
                scored.append((-ratio, name))
    return [name for _, name in sorted(scored)[:n]]


def _near(value: str, names: Iterable[str]) -> str:
    close = nearest(value, names)
    return f" (did you mean {' or '.join(repr(c) for c in close)}?)" if close else ""


def _pair_text(a: str, b: str) -> str:
    return f"{a} and {b}"


class _Walk:
    """The state a procedure builds step by step: jumpers in place and lifted conductors."""

    def __init__(
        self,
        names: RecordNames,
        prefix: tuple[Token, ...],
        jumpers: Iterable[str],
        lifted: Iterable[frozenset[str]],
        shape: bool,
        sequence: bool,
    ) -> None:
        self.names = names
        self.shape = shape
        self.sequence = sequence
        self.prefix = prefix
        self.problems: list[Problem] = []
        self.in_place: dict[str, int | None] = dict.fromkeys(jumpers)
        self.removed: dict[str, int] = {}
        self.lifted: dict[frozenset[str], int | None] = dict.fromkeys(lifted)
        self.landed: dict[frozenset[str], int] = {}
        self._by_owner: dict[str, list[str]] | None = None

    def add(self, step: int | None, message: str, *at: Token) -> None:
        self.problems.append(Problem(at=at, message=message, step=step))

    def bad_shape(self, step: int | None, message: str, *at: Token) -> None:
        """A problem of shape rather than reference (the JSON Schema says these at import)."""
        if self.shape:
            self.problems.append(Problem(at=at, message=message, step=step))

    def where(self, step: int | None) -> str:
        return "before the procedure" if step is None else pointer(*self.prefix, "steps", step)

    def terminal(self, value: Any, step: int, *at: Token) -> bool:
        if not isinstance(value, str):
            self.bad_shape(step, f"a terminal is a text 'OWNER:NAME', got {value!r}", *at)
            return False
        if value not in self.names.terminals:
            self.add(
                step,
                f"the record has no terminal {value!r}: nothing is wired, linked or switched "
                f"there{_near(value, self._like(value))}",
                *at,
            )
            return False
        return True

    def _like(self, value: str) -> Iterable[str]:
        """The terminals to suggest from: those of the same owner (``OWNER:``), else every
        one while there are few (a fleet-sized record is not searched whole per typo)."""
        if self._by_owner is None:
            self._by_owner = {}
            for name in self.names.terminals:
                self._by_owner.setdefault(name.split(":", 1)[0], []).append(name)
        same = self._by_owner.get(value.split(":", 1)[0])
        if same:
            return same
        return self.names.terminals if len(self.names.terminals) <= 5000 else ()

    def pair(self, value: Any, step: int, key: str) -> tuple[str, str] | None:
        if not isinstance(value, list | tuple) or len(value) != 2:
            self.bad_shape(
                step, f"{key} needs a pair of terminals, got {value!r}", "steps", step, key
            )
            return None
        ok = [self.terminal(t, step, "steps", step, key, end) for end, t in enumerate(value)]
        if not all(ok):
            return None
        if value[0] == value[1]:
            self.add(step, f"{key} from a terminal to itself ({value[0]!r})", "steps", step, key)
            return None
        return str(value[0]), str(value[1])

    def step(self, index: int, op: Any) -> None:
        if not isinstance(op, dict):
            self.bad_shape(index, f"an operation is an object, got {op!r}", "steps", index)
            return
        kinds = [k for k in OPERATIONS if k in op]
        if len(kinds) != 1:
            self.bad_shape(
                index,
                f"names {'no operation' if not kinds else 'operations ' + ', '.join(kinds)}; "
                f"a step needs one of {', '.join(OPERATIONS)}",
                "steps",
                index,
            )
            return
        kind = kinds[0]
        value = op[kind]
        handler: Callable[[int, Any, dict], None] | None = getattr(self, f"op_{kind}", None)
        if handler is not None:
            handler(index, value, op)

    def op_set(self, index: int, value: Any, op: dict) -> None:
        if not isinstance(value, str):
            self.bad_shape(index, f"a switch code is a text, got {value!r}", "steps", index, "set")
            return
        positions = self.names.switches.get(value)
        if positions is None:
            self.add(
                index,
                f"unknown switch {value!r}{_near(str(value), self.names.switches)}",
                "steps",
                index,
                "set",
            )
            return
        to = op.get("to")
        if to not in positions and (self.shape or isinstance(to, str)):
            self.add(
                index,
                f"switch {value!r} has no position {to!r} (it has {', '.join(positions)})",
                "steps",
                index,
                "to",
            )

    def op_add_jumper(self, index: int, value: Any, op: dict) -> None:
        self.pair(value, index, "add_jumper")
        explicit = op.get("id")
        jid = str(explicit) if explicit not in (None, "") else default_jumper_id(index)
        if not self.sequence:
            return
        if jid in self.in_place:
            at = ("steps", index, "id") if explicit not in (None, "") else ("steps", index)
            self.add(
                index,
                f"jumper {jid!r} is already in place (added {self._at(self.in_place[jid])}); "
                "give this jumper an id of its own",
                *at,
            )
            return
        self.in_place[jid] = index
        self.removed.pop(jid, None)

    def op_remove_jumper(self, index: int, value: Any, op: dict) -> None:
        if not isinstance(value, str):
            self.bad_shape(index, f"a jumper id is a text, got {value!r}", "steps", index)
            return
        if not self.sequence:
            return
        jid = value
        if jid in self.in_place:
            del self.in_place[jid]
            self.removed[jid] = index
            return
        if jid in self.removed:
            message = f"jumper {jid!r} was already removed at {self.where(self.removed[jid])}"
        else:
            placed = ", ".join(repr(j) for j in self.in_place) or "none"
            message = (
                f"no earlier step adds a jumper {jid!r} (jumpers in place: {placed})"
                f"{_near(jid, self.in_place)}"
            )
        self.add(index, message, "steps", index, "remove_jumper")

    def op_lift(self, index: int, value: Any, op: dict) -> None:
        self._lift_land(index, value, "lift")

    def op_land(self, index: int, value: Any, op: dict) -> None:
        self._lift_land(index, value, "land")

    def _lift_land(self, index: int, value: Any, kind: str) -> None:
        ends = self.pair(value, index, kind)
        if ends is None:
            return
        key = frozenset(ends)
        if key not in self.names.wires and key not in self.names.links:
            self.add(
                index,
                f"no wire or link joins {_pair_text(*ends)}; {kind} names the two ends of a "
                "wire or link of this site",
                "steps",
                index,
                kind,
            )
            return
        what = "wire" if key in self.names.wires else "link"
        if not self.sequence:
            return
        if kind == "lift":
            if key in self.lifted:
                self.add(
                    index,
                    f"the {what} between {_pair_text(*ends)} is already lifted "
                    f"({self._at(self.lifted[key])})",
                    "steps",
                    index,
                    kind,
                )
                return
            self.lifted[key] = index
            self.landed.pop(key, None)
        else:
            if key not in self.lifted:
                was = (
                    f"it was landed again at {self.where(self.landed[key])}"
                    if key in self.landed
                    else "no earlier step lifts it"
                )
                self.add(
                    index,
                    f"the {what} between {_pair_text(*ends)} is not lifted ({was})",
                    "steps",
                    index,
                    kind,
                )
                return
            del self.lifted[key]
            self.landed[key] = index

    def _at(self, step: int | None) -> str:
        return "before the procedure" if step is None else f"at {self.where(step)}"

    def op_remove_device(self, index: int, value: Any, op: dict) -> None:
        self._known(index, value, "remove_device", self.names.devices, "device")

    def op_insert_device(self, index: int, value: Any, op: dict) -> None:
        self._known(index, value, "insert_device", self.names.devices, "device")

    def op_deenergize(self, index: int, value: Any, op: dict) -> None:
        self._known(index, value, "deenergize", self.names.equipment, "equipment")

    def op_energize(self, index: int, value: Any, op: dict) -> None:
        self._known(index, value, "energize", self.names.equipment, "equipment")

    def _known(self, index: int, value: Any, kind: str, known: Collection[str], noun: str) -> None:
        if not isinstance(value, str):
            self.bad_shape(index, f"a {noun} code is a text, got {value!r}", "steps", index, kind)
        elif value not in known:
            self.add(
                index, f"unknown {noun} {value!r}{_near(str(value), known)}", "steps", index, kind
            )


def procedure_problems(
    names: RecordNames,
    steps: Iterable[Any],
    devices: Iterable[Any] = (),
    *,
    prefix: tuple[Token, ...] = (),
    jumpers: Iterable[str] = (),
    lifted: Iterable[frozenset[str]] = (),
    check_shape: bool = True,
    sequence: bool = True,
) -> list[Problem]:
    """Every problem of a procedure (its ``devices`` list and its ``steps``), in step order.

    ``prefix`` is the pointer of the procedure in its document (``("procedures", 2)``); it is
    used in messages that point at another step. ``jumpers`` (ids in place) and ``lifted``
    (the ends of lifted wires and links) describe a starting state other than the normal one.
    With ``check_shape`` False a step of the wrong shape (no operation, a terminal that is not
    a text, a pair that is not two) is passed over: the site file's JSON Schema reports those.
    With ``sequence`` False only the names are checked, not what the steps before left in
    place (jumper ids, lifted conductors): the check of one operation taken alone."""
    walk = _Walk(names, prefix, jumpers, lifted, check_shape, sequence)
    seen: set[str] = set()
    for number, code in enumerate(devices):
        if not isinstance(code, str):
            walk.bad_shape(None, f"a device code is a text, got {code!r}", "devices", number)
        elif code not in names.devices:
            walk.add(
                None, f"unknown device {code!r}{_near(str(code), names.devices)}", "devices", number
            )
        elif code in seen:
            walk.add(None, f"device {code!r} is listed twice", "devices", number)
        seen.add(str(code))
    for index, op in enumerate(steps):
        walk.step(index, op)
    return walk.problems
