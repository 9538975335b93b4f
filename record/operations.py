"""The operations of a procedure step: one vocabulary for the whole project.

A step of a stored procedure is one operation. In the site file (``loopkeep.site/1``) an
operation is a JSON object whose one key names it (design.md, "Procedure operations"):

    {"set": SWITCH, "to": POSITION}        move a switch to a position
    {"add_jumper": [T1, T2], "id": J}      place a temporary jumper
    {"remove_jumper": J}                   take jumper J off
    {"lift": [T1, T2]}                     disconnect the wire (or link) between T1 and T2
    {"land": [T1, T2]}                     reconnect it
    {"remove_device": D}                   take device D out (a withdrawn relay, for example)
    {"insert_device": D}                   put it back
    {"deenergize": EQUIPMENT}              the equipment's CTs stop being live
    {"energize": EQUIPMENT}                they are live again
    {"note": "text"}                       an instruction the checker does not simulate

Here each is a frozen dataclass; ``Operation`` is their union and ``OPERATION_KEYS`` the
vocabulary in this order (the JSON Schema's ``oneOf`` branches, the validator, the engine's
simulation and the planner's text all follow it). ``operation_from_json`` and
``operation_to_json`` convert between the two forms.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar


@dataclass(frozen=True, slots=True)
class SetSwitch:
    """Move switch ``switch`` to position ``to``."""

    KEY: ClassVar[str] = "set"
    switch: str
    to: str

    def to_json(self) -> dict[str, Any]:
        return {"set": self.switch, "to": self.to}

    @property
    def text(self) -> str:
        return f"set {self.switch} to {self.to}"


@dataclass(frozen=True, slots=True)
class AddJumper:
    """Place temporary jumper ``id`` between two terminals."""

    KEY: ClassVar[str] = "add_jumper"
    between: tuple[str, str]
    id: str | None = None

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {"add_jumper": list(self.between)}
        if self.id is not None:
            out["id"] = self.id
        return out

    @property
    def text(self) -> str:
        jumper = f" {self.id}" if self.id else ""
        return f"add jumper{jumper} {self.between[0]} – {self.between[1]}"


@dataclass(frozen=True, slots=True)
class RemoveJumper:
    """Take temporary jumper ``id`` off."""

    KEY: ClassVar[str] = "remove_jumper"
    id: str

    def to_json(self) -> dict[str, Any]:
        return {"remove_jumper": self.id}

    @property
    def text(self) -> str:
        return f"remove jumper {self.id}"


@dataclass(frozen=True, slots=True)
class Lift:
    """Disconnect the wire (or link) between two terminals at its ends."""

    KEY: ClassVar[str] = "lift"
    between: tuple[str, str]

    def to_json(self) -> dict[str, Any]:
        return {"lift": list(self.between)}

    @property
    def text(self) -> str:
        return f"lift {self.between[0]} – {self.between[1]}"


@dataclass(frozen=True, slots=True)
class Land:
    """Reconnect a lifted wire (or link) between two terminals."""

    KEY: ClassVar[str] = "land"
    between: tuple[str, str]

    def to_json(self) -> dict[str, Any]:
        return {"land": list(self.between)}

    @property
    def text(self) -> str:
        return f"land {self.between[0]} – {self.between[1]}"


@dataclass(frozen=True, slots=True)
class RemoveDevice:
    """Take a device out (its inputs and outputs leave the circuit)."""

    KEY: ClassVar[str] = "remove_device"
    device: str

    def to_json(self) -> dict[str, Any]:
        return {"remove_device": self.device}

    @property
    def text(self) -> str:
        return f"remove device {self.device}"


@dataclass(frozen=True, slots=True)
class InsertDevice:
    """Put a removed device back."""

    KEY: ClassVar[str] = "insert_device"
    device: str

    def to_json(self) -> dict[str, Any]:
        return {"insert_device": self.device}

    @property
    def text(self) -> str:
        return f"insert device {self.device}"


@dataclass(frozen=True, slots=True)
class Deenergize:
    """De-energize primary equipment: its CTs stop being live."""

    KEY: ClassVar[str] = "deenergize"
    equipment: str

    def to_json(self) -> dict[str, Any]:
        return {"deenergize": self.equipment}

    @property
    def text(self) -> str:
        return f"deenergize {self.equipment}"


@dataclass(frozen=True, slots=True)
class Energize:
    """Energize primary equipment: its CTs are live again."""

    KEY: ClassVar[str] = "energize"
    equipment: str

    def to_json(self) -> dict[str, Any]:
        return {"energize": self.equipment}

    @property
    def text(self) -> str:
        return f"energize {self.equipment}"


@dataclass(frozen=True, slots=True)
class Note:
    """An instruction for the crew that the checker does not simulate."""

    KEY: ClassVar[str] = "note"
    message: str

    def to_json(self) -> dict[str, Any]:
        return {"note": self.message}

    @property
    def text(self) -> str:
        return f"note: {self.message}"


Operation = (
    SetSwitch
    | AddJumper
    | RemoveJumper
    | Lift
    | Land
    | RemoveDevice
    | InsertDevice
    | Deenergize
    | Energize
    | Note
)

OPERATION_TYPES: dict[str, type[Operation]] = {
    cls.KEY: cls
    for cls in (
        SetSwitch,
        AddJumper,
        RemoveJumper,
        Lift,
        Land,
        RemoveDevice,
        InsertDevice,
        Deenergize,
        Energize,
        Note,
    )
}
# The vocabulary, in design.md's order.
OPERATION_KEYS: tuple[str, ...] = tuple(OPERATION_TYPES)
# Keys that go with the naming key ("to" of set, "id" of add_jumper).
OPERATION_COMPANIONS: dict[str, tuple[str, ...]] = {"set": ("to",), "add_jumper": ("id",)}


class OperationError(ValueError):
    """An object that is not one of the operations, or whose value has the wrong shape."""


def operation_key(op: Mapping[str, Any]) -> str:
    """The key that names the operation of a step object, or ``""`` when it names none."""
    for key in OPERATION_KEYS:
        if key in op:
            return key
    return ""


def _text(value: Any, what: str) -> str:
    if not isinstance(value, str) or not value:
        raise OperationError(f"{what} must be a non-empty string, got {value!r}")
    return value


def _pair(value: Any, what: str) -> tuple[str, str]:
    if not isinstance(value, list | tuple) or len(value) != 2:
        raise OperationError(f"{what} needs a pair of terminals, got {value!r}")
    return _text(value[0], what), _text(value[1], what)


def operation_from_json(op: Any) -> Operation:
    """The typed operation of a step object (``{"set": "TS-1/1", "to": "open"}``).

    Raises ``OperationError`` for an object that names no operation or more than one, or whose
    values have the wrong shape. Other keys (a plan step's ``why`` and ``readings``) are not
    part of the operation and are left out; the site file's schema refuses them in a stored
    procedure.
    """
    if not isinstance(op, Mapping):
        raise OperationError(f"an operation is an object, got {op!r}")
    keys = [k for k in OPERATION_KEYS if k in op]
    if len(keys) != 1:
        raise OperationError(
            f"an operation names exactly one of {', '.join(OPERATION_KEYS)}; got {sorted(op)!r}"
        )
    key = keys[0]
    value = op[key]
    if key == "set":
        return SetSwitch(switch=_text(value, "set"), to=_text(op.get("to"), "set: to"))
    if key == "add_jumper":
        jid = op.get("id")
        return AddJumper(
            between=_pair(value, "add_jumper"),
            id=None if jid is None else _text(jid, "add_jumper: id"),
        )
    if key == "remove_jumper":
        return RemoveJumper(id=_text(value, key))
    if key == "lift":
        return Lift(between=_pair(value, key))
    if key == "land":
        return Land(between=_pair(value, key))
    if key == "remove_device":
        return RemoveDevice(device=_text(value, key))
    if key == "insert_device":
        return InsertDevice(device=_text(value, key))
    if key == "deenergize":
        return Deenergize(equipment=_text(value, key))
    if key == "energize":
        return Energize(equipment=_text(value, key))
    return Note(message=_text(value, key))


def operation_to_json(op: Operation) -> dict[str, Any]:
    """The step object of the site file for a typed operation."""
    return op.to_json()
