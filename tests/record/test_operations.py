"""The procedure operations: one vocabulary (record.operations) that the JSON Schema, the
site-file validator, the engine's simulation and the planner's text all follow."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from analysis.engine.state import op_kind
from analysis.textout import op_text
from inventory.sitefile import validate
from record import operations as ops

SCHEMA = json.loads(
    (Path(__file__).resolve().parents[2] / "inventory" / "sitefile" / "schema.json").read_text()
)

# One example of each operation as design.md writes it, with the planner's wording.
EXAMPLES = [
    ({"set": "TS-101/1", "to": "open"}, ops.SetSwitch("TS-101/1", "open"), "set TS-101/1 to open"),
    (
        {"add_jumper": ["TB-1:1", "TB-1:N"], "id": "J1"},
        ops.AddJumper(("TB-1:1", "TB-1:N"), "J1"),
        "add jumper J1 TB-1:1 – TB-1:N",
    ),
    ({"remove_jumper": "J1"}, ops.RemoveJumper("J1"), "remove jumper J1"),
    ({"lift": ["TB-1:1", "R-1:IA1"]}, ops.Lift(("TB-1:1", "R-1:IA1")), "lift TB-1:1 – R-1:IA1"),
    ({"land": ["TB-1:1", "R-1:IA1"]}, ops.Land(("TB-1:1", "R-1:IA1")), "land TB-1:1 – R-1:IA1"),
    ({"remove_device": "R-1"}, ops.RemoveDevice("R-1"), "remove device R-1"),
    ({"insert_device": "R-1"}, ops.InsertDevice("R-1"), "insert device R-1"),
    ({"deenergize": "CB-1"}, ops.Deenergize("CB-1"), "deenergize CB-1"),
    ({"energize": "CB-1"}, ops.Energize("CB-1"), "energize CB-1"),
    ({"note": "call the operator"}, ops.Note("call the operator"), "note: call the operator"),
]


def test_the_vocabulary_is_design_md_s_list_in_order():
    assert ops.OPERATION_KEYS == (
        "set",
        "add_jumper",
        "remove_jumper",
        "lift",
        "land",
        "remove_device",
        "insert_device",
        "deenergize",
        "energize",
        "note",
    )
    assert [json_op for json_op, _, _ in EXAMPLES] and {
        next(iter(j)) for j, _, _ in EXAMPLES
    } == set(ops.OPERATION_KEYS)


def test_the_schema_branches_are_the_vocabulary():
    branches = SCHEMA["$defs"]["operation"]["oneOf"]
    named = [b["required"][0] for b in branches]
    assert tuple(named) == ops.OPERATION_KEYS
    for branch in branches:
        key = branch["required"][0]
        assert set(branch["properties"]) == {key, *ops.OPERATION_COMPANIONS.get(key, ())}


def test_the_validator_and_the_engine_use_the_vocabulary():
    assert validate.OPERATIONS == ops.OPERATION_KEYS
    for json_op, _, _ in EXAMPLES:
        assert op_kind(json_op) == next(iter(json_op))
    assert op_kind({"open": "TS-1/1"}) == ""


@pytest.mark.parametrize(("json_op", "typed", "text"), EXAMPLES, ids=lambda x: str(x)[:20])
def test_each_operation_round_trips_and_reads_as_a_planner_writes_it(json_op, typed, text):
    assert ops.operation_from_json(json_op) == typed
    assert ops.operation_to_json(typed) == json_op
    assert typed.text == text
    assert op_text(json_op) == text


@pytest.mark.parametrize(
    ("bad", "message"),
    [
        ("set TS-1", "an operation is an object"),
        ({"open": "TS-1/1"}, "names exactly one of set, add_jumper"),
        ({"set": "TS-1/1", "remove_device": "R-1", "to": "open"}, "names exactly one"),
        ({"set": "TS-1/1"}, "set: to must be a non-empty string"),
        ({"add_jumper": ["TB-1:1"], "id": "J1"}, "add_jumper needs a pair of terminals"),
        ({"note": ""}, "note must be a non-empty string"),
    ],
)
def test_a_malformed_operation_says_what_is_wrong(bad, message):
    with pytest.raises(ops.OperationError, match=message):
        ops.operation_from_json(bad)


def test_operations_are_frozen():
    op = ops.SetSwitch("TS-1/1", "open")
    with pytest.raises(AttributeError):
        op.to = "closed"  # type: ignore[misc]


def test_a_plan_step_s_annotations_are_not_part_of_the_operation():
    step = {"set": "TS-1/1", "to": "open", "why": "short CT A first", "readings": []}
    assert ops.operation_from_json(step) == ops.SetSwitch("TS-1/1", "open")
