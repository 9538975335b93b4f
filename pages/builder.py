"""The procedure builder's form: a draft procedure held in the page (each step an operation in
a hidden field, written by the server, never typed by hand), the lists to pick from (taken
from the site document), and the change each button asks for. Nothing here stores or checks:
the view checks the draft with ``analysis.actions.draft_check`` and saves with
``inventory.services.procedure_save``."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any

from django.http import QueryDict

from analysis.textout import op_text
from record.operations import OPERATION_KEYS, OperationError, operation_from_json

MAX_STEPS = 200
NOTE_MAX = 300

# The operations a planner picks, with the words the list shows.
OP_LABELS = {
    "set": "set a switch to a position",
    "add_jumper": "add a temporary jumper",
    "remove_jumper": "remove a temporary jumper",
    "lift": "lift a wire or link",
    "land": "land a wire or link",
    "remove_device": "remove a device",
    "insert_device": "insert a device",
    "deenergize": "de-energize equipment",
    "energize": "energize equipment",
    "note": "note (not simulated)",
}
assert set(OP_LABELS) == set(OPERATION_KEYS)  # one vocabulary (record.operations)


@dataclass(frozen=True)
class Choices:
    """What the site's record offers to pick from."""

    switches: dict[str, list[str]]
    terminals: list[str]
    wires: list[tuple[str, str]]
    devices: list[str]
    equipment: list[str]

    @classmethod
    def from_document(cls, doc: dict[str, Any]) -> Choices:
        terminals: set[str] = set()
        wires: list[tuple[str, str]] = []
        for wire in doc.get("wires", []):
            wires.append((wire["from"], wire["to"]))
        for a, b in doc.get("links", []):
            wires.append((a, b))
        for a, b in wires:
            terminals.update((a, b))
        for switch in doc.get("switches", []):
            for contact in switch.get("contacts", []):
                terminals.update(contact["between"])
        for device in doc.get("devices", []):
            for entry in device.get("inputs", []):
                terminals.update((entry["from"], entry["to"]))
            for entry in device.get("outputs", []):
                terminals.update((entry["terminal"], entry["target"]))
        terminals.update(doc.get("grounds", []))
        for ct in doc.get("cts", []):
            terminals.update(f"{ct['code']}:{name}" for name in ct.get("terminals", {}))
        return cls(
            switches={s["code"]: list(s["positions"]) for s in doc.get("switches", [])},
            terminals=sorted(terminals),
            wires=sorted(set(wires)),
            devices=sorted(d["code"] for d in doc.get("devices", [])),
            equipment=sorted(e["code"] for e in doc.get("equipment", [])),
        )


@dataclass
class Draft:
    """The procedure being built: its code, title, devices and steps, and what went wrong."""

    code: str = ""
    title: str = ""
    devices: list[str] = field(default_factory=list)
    steps: list[dict[str, Any]] = field(default_factory=list)
    errors: list[str] = field(default_factory=list)
    # the fields of the next operation (kept between refreshes)
    pick: dict[str, str] = field(default_factory=dict)

    @property
    def step_items(self) -> list[tuple[int, str, str]]:
        """(number, text, JSON for the hidden field) per step."""
        return [
            (i, op_text(op), json.dumps(op, separators=(",", ":")))
            for i, op in enumerate(self.steps, start=1)
        ]

    def open_jumpers(self) -> list[str]:
        """Jumpers placed by the steps so far and not taken off."""
        placed: list[str] = []
        for op in self.steps:
            if "add_jumper" in op and op.get("id"):
                placed.append(op["id"])
            elif "remove_jumper" in op and op["remove_jumper"] in placed:
                placed.remove(op["remove_jumper"])
        return placed

    def next_jumper_id(self) -> str:
        used = {op.get("id") for op in self.steps if "add_jumper" in op}
        n = 1
        while f"J{n}" in used:
            n += 1
        return f"J{n}"


PICK_FIELDS: tuple[str, ...] = (
    *("op", "switch", "position", "term_a", "term_b", "jumper_id", "jumper", "wire"),
    *("device", "equipment", "note"),
)


def draft_from_post(data: QueryDict) -> Draft:
    """The draft a form posted. A step the server did not write (a tampered field) is
    dropped with an error naming it."""
    draft = Draft(
        code=data.get("code", "").strip(),
        title=data.get("title", "").strip(),
        devices=[d for d in data.getlist("devices") if d],
        pick={k: data.get(k, "").strip() for k in PICK_FIELDS},
    )
    for i, raw in enumerate(data.getlist("step")[:MAX_STEPS], start=1):
        try:
            draft.steps.append(operation_from_json(json.loads(raw)).to_json())
        except (ValueError, OperationError) as exc:
            draft.errors.append(f"step {i} was not understood and is left out: {exc}")
    return draft


def operation_from_pick(draft: Draft, choices: Choices) -> dict[str, Any]:
    """The operation the pick fields describe. Raises ``ValueError`` saying which field is
    missing or names what the record does not have."""
    pick = draft.pick
    kind = pick.get("op", "")
    if kind not in OP_LABELS:
        raise ValueError("pick an operation")
    if kind == "set":
        switch, position = pick.get("switch", ""), pick.get("position", "")
        if switch not in choices.switches:
            raise ValueError("pick a switch")
        if position not in choices.switches[switch]:
            raise ValueError(f"pick a position of {switch}")
        return {"set": switch, "to": position}
    if kind == "add_jumper":
        a, b = pick.get("term_a", ""), pick.get("term_b", "")
        if a not in choices.terminals or b not in choices.terminals:
            raise ValueError("pick both terminals of the jumper")
        if a == b:
            raise ValueError("a jumper joins two different terminals")
        jid = pick.get("jumper_id", "") or draft.next_jumper_id()
        if jid in draft.open_jumpers():
            raise ValueError(f"jumper {jid} is already in place; give another name")
        return {"add_jumper": [a, b], "id": jid}
    if kind == "remove_jumper":
        jid = pick.get("jumper", "")
        if jid not in draft.open_jumpers():
            raise ValueError("pick a jumper placed by an earlier step")
        return {"remove_jumper": jid}
    if kind in ("lift", "land"):
        ends = tuple(pick.get("wire", "").split("|"))
        if ends not in choices.wires:
            raise ValueError("pick a wire or link")
        return {kind: list(ends)}
    if kind in ("remove_device", "insert_device"):
        if pick.get("device", "") not in choices.devices:
            raise ValueError("pick a device")
        return {kind: pick["device"]}
    if kind in ("deenergize", "energize"):
        if pick.get("equipment", "") not in choices.equipment:
            raise ValueError("pick the equipment")
        return {kind: pick["equipment"]}
    text = " ".join(pick.get("note", "").split())
    if not text:
        raise ValueError("write the note")
    return {"note": text[:NOTE_MAX]}


def apply_action(draft: Draft, action: str, choices: Choices) -> None:
    """Change the draft as a button asks: ``add``, ``remove-N``, ``up-N``, ``down-N``
    (``refresh`` and ``save`` change nothing here)."""
    if action == "add":
        if len(draft.steps) >= MAX_STEPS:
            draft.errors.append(f"a procedure has at most {MAX_STEPS} steps")
            return
        try:
            draft.steps.append(operation_from_pick(draft, choices))
        except ValueError as exc:
            draft.errors.append(str(exc))
        else:
            for key in ("term_a", "term_b", "jumper_id", "jumper", "note"):
                draft.pick[key] = ""
        return
    verb, _, number = action.partition("-")
    if verb not in ("remove", "up", "down") or not number.isdigit():
        return
    i = int(number) - 1
    if not 0 <= i < len(draft.steps):
        return
    if verb == "remove":
        del draft.steps[i]
    elif verb == "up" and i > 0:
        draft.steps[i - 1], draft.steps[i] = draft.steps[i], draft.steps[i - 1]
    elif verb == "down" and i < len(draft.steps) - 1:
        draft.steps[i + 1], draft.steps[i] = draft.steps[i], draft.steps[i + 1]
