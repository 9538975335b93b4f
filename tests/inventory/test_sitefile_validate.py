"""The site file checks (inventory.sitefile): parsing, JSON Schema and sense checks. No database.

Each bad-input case edits one good document and lists the exact error lines. The rules come
from the site file contract of the design (format ``loopkeep.site/1``), from the standards the
values belong to (named per case) or from the trade's practice ("common practice, no source").
"""

from __future__ import annotations

import copy
import json
from pathlib import Path

import jsonschema
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from inventory.sitefile import (
    SiteFileError,
    SiteFileParseError,
    load_schema,
    load_site_file,
    load_site_text,
    validate_site_document,
)
from inventory.sitefile.gate import fast_path_allowed, plain_json, schema_gate
from trade.accuracy import parse_accuracy
from trade.conductors import KNOWN_SIZES

DEMO = Path(__file__).resolve().parents[2] / "fixtures" / "demo"


def good() -> dict:
    """One breaker, one multi-ratio CT through a test-switch pole into a relay (invented)."""
    return copy.deepcopy(
        {
            "format": "loopkeep.site/1",
            "site": {"code": "TST", "name": "Test Yard 115 kV", "design_temp_c": 75},
            "terminal_blocks": [{"code": "TB-101", "description": "CT leads"}],
            "buses": [
                {
                    "code": "B115",
                    "kv": 115,
                    "three_phase_fault_ka": 18.5,
                    "ground_fault_ka": 15.2,
                    "x_over_r": 12,
                }
            ],
            "equipment": [
                {
                    "code": "CB-101",
                    "kind": "breaker",
                    "bus": "B115",
                    "in_service": True,
                    "max_load_a": 320,
                }
            ],
            "cts": [
                {
                    "code": "CB-101-A",
                    "equipment": "CB-101",
                    "phase": "A",
                    "set": "CB-101-R",
                    "secondary_a": 5,
                    "terminals": {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600},
                    "in_use": ["X1", "X4"],
                    "accuracy": "C400",
                    "winding_ohm": 0.3,
                    "rating_factor": 1.5,
                    "excitation": [[0.005, 20], [0.02, 120], [0.06, 300]],
                    "tap_changes": [
                        {
                            "from": ["X1", "X5"],
                            "to": ["X1", "X4"],
                            "at": "2024-03-05T10:00:00Z",
                            "by": "A. Clerk",
                            "reason": "WO-1234",
                        }
                    ],
                }
            ],
            "devices": [
                {
                    "code": "R-101",
                    "kind": "relay",
                    "functions": ["50", "51"],
                    "ratio_setting": "400:5",
                    "inputs": [
                        {
                            "name": "IA",
                            "from": "R-101:IA1",
                            "to": "R-101:IA2",
                            "rated_a": 5,
                            "burden_va": 0.2,
                            "pf": 1.0,
                        },
                    ],
                    "outputs": [{"name": "TRIP", "terminal": "R-101:T1", "target": "CB-101:TC"}],
                }
            ],
            "wires": [
                {"from": "CB-101-A:X1", "to": "TB-101:1", "size": "10AWG", "length_m": 85},
                {"from": "CB-101-A:X4", "to": "TB-101:N", "size": "10AWG", "length_m": 85},
                {"from": "TB-101:1", "to": "TS-101:1L", "size": "12AWG", "length_ft": 5},
                {"from": "R-101:IA2", "to": "TB-101:N", "r_ohm": 0.01},
            ],
            "links": [["TS-101:1R", "R-101:IA1"], ["TS-101:SB", "TB-101:N"]],
            "grounds": ["TB-101:N"],
            "switches": [
                {
                    "code": "TS-101/1",
                    "kind": "test_switch_pole",
                    "positions": ["closed", "open"],
                    "normal": "closed",
                    "transition": "make_before_break",
                    "contacts": [
                        {"between": ["TS-101:1L", "TS-101:1R"], "closed_in": ["closed"]},
                        {"between": ["TS-101:1L", "TS-101:SB"], "closed_in": ["open"]},
                    ],
                },
                {
                    "code": "TS-101/T1",
                    "kind": "test_switch_pole",
                    "positions": ["closed", "open"],
                    "normal": "closed",
                    "transition": "break_before_make",
                    "contacts": [
                        {"between": ["TS-101:T1L", "TS-101:T1R"], "closed_in": ["closed"]}
                    ],
                },
            ],
            "procedures": [
                {
                    "code": "P-1",
                    "title": "Remove R-101",
                    "author": "A. Planner",
                    "devices": ["R-101"],
                    "steps": [
                        {"set": "TS-101/T1", "to": "open"},
                        {"set": "TS-101/1", "to": "open"},
                        {"add_jumper": ["TB-101:1", "TB-101:N"], "id": "J1"},
                        {"lift": ["TB-101:1", "TS-101:1L"]},
                        {"remove_device": "R-101"},
                        {"insert_device": "R-101"},
                        {"land": ["TS-101:1L", "TB-101:1"]},
                        {"remove_jumper": "J1"},
                        {"deenergize": "CB-101"},
                        {"energize": "CB-101"},
                        {"note": "restore the trip last"},
                        {"set": "TS-101/T1", "to": "closed"},
                    ],
                }
            ],
        }
    )


def lines(doc) -> list[str]:
    return [str(e) for e in validate_site_document(doc)]


def _accuracy_message(text: str, **kwargs) -> str:
    with pytest.raises(ValueError) as info:
        parse_accuracy(text, **kwargs)
    return str(info.value)


def _set(path: str, value):
    """An edit that sets the value at a slash path such as 'cts/0/secondary_a'."""

    def edit(doc):
        *parents, last = path.split("/")
        node = doc
        for token in parents:
            node = node[int(token)] if isinstance(node, list) else node[token]
        if isinstance(node, list):
            node[int(last)] = value
        else:
            node[last] = value

    return edit


def _drop(path: str):
    def edit(doc):
        *parents, last = path.split("/")
        node = doc
        for token in parents:
            node = node[int(token)] if isinstance(node, list) else node[token]
        del node[last]

    return edit


def _append(path: str, value):
    def edit(doc):
        node = doc
        for token in path.split("/"):
            node = node[int(token)] if isinstance(node, list) else node[token]
        node.append(copy.deepcopy(value))

    return edit


def _both(*edits):
    def edit(doc):
        for e in edits:
            e(doc)

    return edit


SIZES = ", ".join(KNOWN_SIZES)
OWNER = "not a CT, device, equipment, terminal block or switch group of this site"
CT_HAS = "(it has X1, X2, X3, X4, X5)"

# (id, edit, expected error lines)
NO_TB101_1 = (
    "the record has no terminal 'TB-101:1': nothing is wired, linked or switched there "
    "(did you mean 'TB-101:N'?)"
)

BAD = [
    # --- structure (design.md site file contract) ---
    (
        "wrong-format",
        _set("format", "loopkeep.site/2"),
        ["/format: must be 'loopkeep.site/1', got 'loopkeep.site/2'"],
    ),
    ("missing-site", _drop("site"), ["/site: required field is missing"]),
    (
        "misspelt-key",
        lambda d: d["cts"][0].update(equipmnt=d["cts"][0].pop("equipment")),
        [
            "/cts/0/equipment: required field is missing",
            "/cts/0/equipmnt: unknown field (did you mean 'equipment'?)",
        ],
    ),
    (
        "misspelt-top-level",
        lambda d: d.update(wirez=d.pop("wires")),
        # the procedure's steps now name a terminal only the wires touched
        [
            f"/procedures/0/steps/2/add_jumper/0: {NO_TB101_1}",
            f"/procedures/0/steps/3/lift/0: {NO_TB101_1}",
            f"/procedures/0/steps/6/land/1: {NO_TB101_1}",
            "/wirez: unknown field (did you mean 'wires'?)",
        ],
    ),
    (
        "text-for-number",
        _set("wires/0/length_m", "85"),
        ["/wires/0/length_m: must be a number, got '85'"],
    ),
    ("boolean-for-number", _set("buses/0/kv", True), ["/buses/0/kv: must be a number, got true"]),
    (
        "negative-length",
        _set("wires/0/length_m", -5),
        ["/wires/0/length_m: must be greater than 0, got -5"],
    ),
    (
        "zero-resistance",
        _set("wires/3/r_ohm", 0),
        ["/wires/3/r_ohm: must be greater than 0, got 0"],
    ),
    # IEEE C57.13 and IEC 61869-2 rate CT secondaries at 1 A or 5 A (from memory)
    (
        "secondary-2a",
        _set("cts/0/secondary_a", 2),
        ["/cts/0/secondary_a: must be one of 1, 5, got 2"],
    ),
    (
        "phase-x",
        _set("cts/0/phase", "X"),
        ["/cts/0/phase: must be one of 'A', 'B', 'C', 'N', got 'X'"],
    ),
    (
        "terminal-without-owner",
        _set("grounds/0", "TB-101"),
        [
            "/grounds/0: must be a terminal 'OWNER:NAME' such as 'TB-101:4' (printable, no "
            "spaces; the owner up to 60 characters, the name up to 30), got 'TB-101'"
        ],
    ),
    (
        "in-use-one-terminal",
        _set("cts/0/in_use", ["X1"]),
        ["/cts/0/in_use: must hold exactly 2 items, got 1"],
    ),
    (
        "step-missing-to",
        _set("procedures/0/steps/0", {"set": "TS-101/T1"}),
        ["/procedures/0/steps/0/to: required field is missing"],
    ),
    (
        "step-two-operations",
        _set("procedures/0/steps/0", {"set": "TS-101/T1", "to": "open", "note": "x"}),
        ["/procedures/0/steps/0: a step holds one operation, this one has set, note"],
    ),
    (
        "step-no-operation",
        _set("procedures/0/steps/0", {"sett": "TS-101/T1", "to": "open"}),
        [
            "/procedures/0/steps/0: names no operation; a step needs one of set, add_jumper, "
            "remove_jumper, lift, land, remove_device, insert_device, deenergize, energize, note",
            "/procedures/0/steps/0/sett: unknown field (did you mean 'set'?)",
        ],
    ),
    # an unreadable winding is reported once, not again at every terminal that names it
    (
        "terminals-not-an-object",
        _set("cts/0/terminals", ["X1", "X4"]),
        ["/cts/0/terminals: must be an object, got ['X1', 'X4']"],
    ),
    (
        "terminals-missing",
        _drop("cts/0/terminals"),
        ["/cts/0/terminals: required field is missing"],
    ),
    # --- duplicates (natural keys unique per site: design.md) ---
    (
        "duplicate-codes",
        _both(
            _append("cts", good()["cts"][0]),
            _append("devices", {"code": "R-101", "kind": "meter"}),
            _append("switches", good()["switches"][1]),
            _append("buses", {"code": "B115", "kv": 13.8}),
            _append("equipment", {"code": "CB-101", "kind": "breaker"}),
            _append("procedures", {"code": "P-1", "title": "x", "steps": [{"note": "x"}]}),
            _append("terminal_blocks", {"code": "TB-101"}),
        ),
        [
            "/terminal_blocks/1/code: duplicate terminal block code 'TB-101' (first at "
            "/terminal_blocks/0)",
            "/buses/1/code: duplicate bus code 'B115' (first at /buses/0)",
            "/equipment/1/code: duplicate equipment code 'CB-101' (first at /equipment/0)",
            "/cts/1/code: duplicate CT code 'CB-101-A' (first at /cts/0)",
            "/cts/1/phase: set 'CB-101-R' already has a phase A CT (CB-101-A at /cts/0)",
            "/devices/1/code: duplicate device code 'R-101' (first at /devices/0)",
            "/switches/2/code: duplicate switch code 'TS-101/T1' (first at /switches/1)",
            "/procedures/1/code: duplicate procedure code 'P-1' (first at /procedures/0)",
        ],
    ),
    (
        "duplicate-input-and-output-names",
        _both(
            _append(
                "devices/0/inputs",
                {
                    "name": "IA",
                    "from": "R-101:IB1",
                    "to": "R-101:IB2",
                    "rated_a": 5,
                    "burden_va": 0.2,
                },
            ),
            _append(
                "devices/0/outputs", {"name": "TRIP", "terminal": "R-101:T2", "target": "CB-101:TC"}
            ),
        ),
        [
            "/devices/0/inputs/1/name: duplicate input name 'IA' (first at /devices/0/inputs/0)",
            "/devices/0/outputs/1/name: duplicate output name 'TRIP' (first at "
            "/devices/0/outputs/0)",
        ],
    ),
    (
        "duplicate-jumper-id",
        _set("procedures/0/steps/4", {"add_jumper": ["TB-101:N", "TS-101:SB"], "id": "J1"}),
        [
            "/procedures/0/steps/4/id: jumper 'J1' is already in place (added at "
            "/procedures/0/steps/2); give this jumper an id of its own"
        ],
    ),
    # --- references ---
    (
        "unknown-equipment",
        _set("cts/0/equipment", "CB-9"),
        ["/cts/0/equipment: unknown equipment 'CB-9'"],
    ),
    ("unknown-bus", _set("equipment/0/bus", "B13"), ["/equipment/0/bus: unknown bus 'B13'"]),
    (
        "unknown-owner",
        _set("wires/0/from", "CB-10-A:X1"),
        [f"/wires/0/from: unknown owner 'CB-10-A' of terminal 'CB-10-A:X1': {OWNER}"],
    ),
    (
        "ct-terminal-missing",
        _set("wires/1/from", "CB-101-A:X7"),
        [f"/wires/1/from: CT 'CB-101-A' has no terminal 'X7' {CT_HAS}"],
    ),
    (
        "unknown-owners-everywhere",
        _both(
            _set("devices/0/outputs/0/target", "CB-9:TC"),
            _set("links/0/1", "R-9:IA1"),
            _set("switches/0/contacts/1/between/1", "TS-9:SB"),
        ),
        [
            f"/devices/0/outputs/0/target: unknown owner 'CB-9' of terminal 'CB-9:TC': {OWNER}",
            f"/links/0/1: unknown owner 'R-9' of terminal 'R-9:IA1': {OWNER}",
            "/switches/0/contacts/1/between/1: unknown owner 'TS-9' of terminal 'TS-9:SB': "
            f"{OWNER}",
        ],
    ),
    (
        "in-use-terminal-missing",
        _set("cts/0/in_use", ["X1", "X9"]),
        [f"/cts/0/in_use/1: the CT has no terminal 'X9' {CT_HAS}"],
    ),
    (
        "unknown-switch-and-position",
        _both(
            _set("procedures/0/steps/0", {"set": "TS-101/T9", "to": "open"}),
            _set("procedures/0/steps/1", {"set": "TS-101/1", "to": "shorted"}),
        ),
        [
            "/procedures/0/steps/0/set: unknown switch 'TS-101/T9' (did you mean 'TS-101/T1' "
            "or 'TS-101/1'?)",
            "/procedures/0/steps/1/to: switch 'TS-101/1' has no position 'shorted' (it has closed, "
            "open)",
        ],
    ),
    (
        "unknown-device-and-equipment-in-steps",
        _both(
            _set("procedures/0/devices", ["R-101", "R-9"]),
            _set("procedures/0/steps/4", {"remove_device": "R-9"}),
            _set("procedures/0/steps/8", {"deenergize": "CB-9"}),
        ),
        [
            "/procedures/0/devices/1: unknown device 'R-9'",
            "/procedures/0/steps/4/remove_device: unknown device 'R-9'",
            "/procedures/0/steps/8/deenergize: unknown equipment 'CB-9' (did you mean 'CB-101'?)",
        ],
    ),
    (
        "remove-jumper-never-added",
        _set("procedures/0/steps/7", {"remove_jumper": "J2"}),
        [
            "/procedures/0/steps/7/remove_jumper: no earlier step adds a jumper 'J2' (jumpers "
            "in place: 'J1')"
        ],
    ),
    (
        "remove-jumper-twice",
        _append("procedures/0/steps", {"remove_jumper": "J1"}),
        [
            "/procedures/0/steps/12/remove_jumper: jumper 'J1' was already removed at "
            "/procedures/0/steps/7"
        ],
    ),
    (
        "lift-no-such-wire",
        _set("procedures/0/steps/3", {"lift": ["TB-101:1", "TB-101:N"]}),
        [
            "/procedures/0/steps/3/lift: no wire or link joins TB-101:1 and TB-101:N; lift "
            "names the two ends of a wire or link of this site",
            # and the land that was to put the wire back now lands one that was never lifted
            "/procedures/0/steps/6/land: the wire between TS-101:1L and TB-101:1 is not lifted "
            "(no earlier step lifts it)",
        ],
    ),
    # --- impossible values ---
    (
        "normal-not-a-position",
        _set("switches/0/normal", "shut"),
        ["/switches/0/normal: 'shut' is not one of the positions (closed, open)"],
    ),
    (
        "closed-in-unknown-position",
        _set("switches/0/contacts/1/closed_in", ["opn"]),
        ["/switches/0/contacts/1/closed_in/0: 'opn' is not one of the positions (closed, open)"],
    ),
    (
        "duplicate-position",
        _set("switches/0/positions", ["closed", "open", "closed"]),
        ["/switches/0/positions/2: duplicate position 'closed'"],
    ),
    (
        "in-use-same-terminal",
        _both(_set("cts/0/in_use", ["X1", "X1"]), _drop("cts/0/tap_changes")),
        ["/cts/0/in_use/1: both terminals are 'X1'; a tap needs two different terminals"],
    ),
    # A winding has one tap at each point (common practice, no source)
    (
        "two-terminals-same-position",
        _set("cts/0/terminals/X3", 100),
        [
            "/cts/0/terminals/X3: position 100 is also that of X2; two terminals cannot sit at the "
            "same point of the winding"
        ],
    ),
    # Excitation curves rise in both current and voltage (IEEE C57.13 test curve, from memory)
    (
        "excitation-not-rising",
        _set("cts/0/excitation", [[0.005, 20], [0.004, 120], [0.06, 90]]),
        [
            "/cts/0/excitation/1/0: exciting current must rise from point to point: 0.004 is "
            "not above 0.005 of point 0",
            "/cts/0/excitation/2/1: secondary voltage must rise from point to point: 90 is "
            "not above 120 of point 1",
        ],
    ),
    (
        "excitation-not-positive",
        _set("cts/0/excitation", [[-0.005, 20], [0.02, 0]]),
        [
            "/cts/0/excitation/0/0: must be greater than 0, got -0.005",
            "/cts/0/excitation/1/1: must be greater than 0, got 0",
            "/cts/0/excitation/1/1: secondary voltage must rise from point to point: 0 is "
            "not above 20 of point 0",
        ],
    ),
    (
        "unknown-wire-size",
        _set("wires/0/size", "11AWG"),
        [f"/wires/0/size: unknown wire size '11AWG'; known: {SIZES}"],
    ),
    (
        "unknown-material",
        _set("wires/0/material", "fe"),
        ["/wires/0/material: must be one of 'cu', 'al', got 'fe'"],
    ),
    (
        "wire-resistance-and-size",
        _set("wires/3/size", "12AWG"),
        ["/wires/3: give r_ohm alone, or size with length_m or length_ft; not both"],
    ),
    (
        "wire-without-resistance",
        _both(_drop("wires/3/r_ohm")),
        ["/wires/3: no resistance: give size with length_m or length_ft, or r_ohm"],
    ),
    (
        "wire-size-without-length",
        _drop("wires/0/length_m"),
        ["/wires/0: size given without length_m or length_ft"],
    ),
    (
        "wire-length-without-size",
        _drop("wires/0/size"),
        ["/wires/0: length given without a size (e.g. '10AWG', '4mm2')"],
    ),
    (
        "wire-both-lengths",
        _set("wires/0/length_ft", 280),
        ["/wires/0: give length_m or length_ft, not both"],
    ),
    (
        "wire-to-itself",
        _set("wires/0/to", "CB-101-A:X1"),
        ["/wires/0/to: a wire from a terminal to itself ('CB-101-A:X1')"],
    ),
    (
        "link-to-itself",
        _set("links/0", ["TS-101:1R", "TS-101:1R"]),
        ["/links/0/1: a link from a terminal to itself ('TS-101:1R')"],
    ),
    # IEEE C57.13 class voltages are 10..800 V (S1)
    (
        "accuracy-not-a-class",
        _set("cts/0/accuracy", "C450"),
        [f"/cts/0/accuracy: {_accuracy_message('C450')}"],
    ),
    # IEC 61869-2 writes the rated output beside the class; it must match rated_burden_va
    (
        "accuracy-va-disagrees",
        _both(_set("cts/0/accuracy", "5P20 15VA"), _set("cts/0/rated_burden_va", 10)),
        ["/cts/0/accuracy: " + _accuracy_message("5P20 15VA", rated_burden_va=10)],
    ),
    (
        "ratio-setting-not-a-ratio",
        _set("devices/0/ratio_setting", "400"),
        ["/devices/0/ratio_setting: ratio setting must look like '400:5' or '1000:1', got '400'"],
    ),
    (
        "tap-change-unknown-terminal",
        _set("cts/0/tap_changes/0/from", ["X1", "X6"]),
        [f"/cts/0/tap_changes/0/from/1: the CT has no terminal 'X6' {CT_HAS}"],
    ),
    (
        "tap-change-chain-broken",
        _append(
            "cts/0/tap_changes",
            {"from": ["X2", "X5"], "to": ["X1", "X4"], "at": "2025-01-01T00:00:00Z"},
        ),
        [
            "/cts/0/tap_changes/1/from: [X2, X5] does not follow the previous change, which left "
            "[X1, X4]"
        ],
    ),
    (
        "tap-change-time",
        _both(
            _set("cts/0/tap_changes/0/at", "5 March 2024"),
            _append(
                "cts/0/tap_changes",
                {"from": ["X1", "X4"], "to": ["X1", "X5"], "at": "2020-01-01T00:00Z"},
            ),
            _append(
                "cts/0/tap_changes",
                {"from": ["X1", "X5"], "to": ["X1", "X4"], "at": "2019-01-01T00:00:00+01:00"},
            ),
        ),
        [
            "/cts/0/tap_changes/0/at: must be a date and time with its zone like "
            "'2024-03-05T10:00:00Z', got '5 March 2024'",
            "/cts/0/tap_changes/2/at: earlier than change 1; list tap changes oldest first",
        ],
    ),
    (
        "burden-both",
        _set("devices/0/inputs/0/burden_ohm", [0.05, 0.01]),
        ["/devices/0/inputs/0: give burden_va (with pf) or burden_ohm, not both"],
    ),
    (
        "burden-neither",
        _drop("devices/0/inputs/0/burden_va"),
        [
            "/devices/0/inputs/0: no burden: give burden_va (VA at rated current, with pf) or "
            "burden_ohm [R, X]"
        ],
    ),
    (
        "pf-with-ohms",
        _both(
            _drop("devices/0/inputs/0/burden_va"),
            _set("devices/0/inputs/0/burden_ohm", [0.05, 0.01]),
        ),
        ["/devices/0/inputs/0/pf: pf goes with burden_va; burden_ohm already gives R and X"],
    ),
    (
        "input-to-itself",
        _set("devices/0/inputs/0/to", "R-101:IA1"),
        ["/devices/0/inputs/0/to: an input from a terminal to itself ('R-101:IA1')"],
    ),
]


@pytest.mark.parametrize(("edit", "expected"), [c[1:] for c in BAD], ids=[c[0] for c in BAD])
def test_bad_input_is_reported_with_pointer(edit, expected):
    doc = good()
    edit(doc)
    assert lines(doc) == expected


def test_the_good_document_is_clean():
    assert lines(good()) == []


def test_every_error_is_listed_in_document_order():
    doc = good()
    doc["wires"][0]["length_m"] = -5
    doc["cts"][0]["equipment"] = "CB-9"
    doc["site"]["design_temp_c"] = "hot"
    assert lines(doc) == [
        "/site/design_temp_c: must be a number, got 'hot'",
        "/cts/0/equipment: unknown equipment 'CB-9'",
        "/wires/0/length_m: must be greater than 0, got -5",
    ]


def test_structurally_broken_sections_do_not_crash_the_sense_checks():
    doc = good()
    doc["cts"] = {"CB-101-A": {}}
    doc["wires"][0] = "CB-101-A:X1 to TB-101:1"
    doc["procedures"][0]["steps"] = "set everything open"
    assert lines(doc) == [
        "/cts: must be a list, got an object",
        "/wires/0: must be an object, got 'CB-101-A:X1 to TB-101:1'",
        # the CTs are gone, so the wire from one of them names an unknown owner
        "/wires/1/from: unknown owner 'CB-101-A' of terminal 'CB-101-A:X4': not a CT, device, "
        "equipment, terminal block or switch group of this site",
        "/procedures/0/steps: must be a list, got 'set everything open'",
    ]


def test_a_document_that_is_not_an_object():
    assert validate_site_document([1, 2]) == [
        SiteFileError("", "a site file must be an object, got a list")
    ]


def test_error_prints_as_pointer_and_message():
    assert str(SiteFileError("/cts/3/in_use/1", "x")) == "/cts/3/in_use/1: x"


def test_pointer_escapes_slash_and_tilde():
    # RFC 6901: "~" is written "~0" and "/" is written "~1" inside a token.
    doc = good()
    doc["cts"][0]["terminals"]["X/6"] = 700
    doc["cts"][0]["terminals"]["X~7"] = 800
    assert lines(doc) == []
    doc["cts"][0]["terminals"]["X/6"] = -1
    doc["cts"][0]["terminals"]["X~7"] = "800"
    assert lines(doc) == [
        "/cts/0/terminals/X~16: must be at least 0, got -1",
        "/cts/0/terminals/X~07: must be a number, got '800'",
    ]


# --- parsing ------------------------------------------------------------------------------


def test_json_syntax_error_names_line_and_column():
    with pytest.raises(SiteFileParseError) as info:
        load_site_text('{\n  "format": "loopkeep.site/1",\n  "site": {,\n}', name="x.json")
    assert str(info.value) == (
        "x.json: not valid JSON at line 3, column 12: Expecting property name enclosed in "
        "double quotes"
    )


def test_yaml_syntax_error_names_line_and_column():
    with pytest.raises(SiteFileParseError) as info:
        load_site_text("format: loopkeep.site/1\nsite:\n  code: [QFN\n", name="x.yaml")
    assert str(info.value).startswith("x.yaml: not valid YAML at line 4, column 1:")


def test_top_level_must_be_an_object():
    with pytest.raises(SiteFileParseError, match="not a list"):
        load_site_text("[1, 2]")


def test_yaml_keeps_ratios_positions_and_times_as_text():
    # YAML 1.1 would read 400:5 as the base-60 number 24005 and "on"/"off" as booleans.
    doc = load_site_text(
        "devices:\n  - {code: R-1, kind: relay, ratio_setting: 400:5}\n"
        "switches:\n  - {positions: [on, off]}\n"
        "at: 2024-03-05T10:00:00Z\nflag: true\nn: 12\nx: 0.5\n",
        name="s.yml",
    )
    assert doc["devices"][0]["ratio_setting"] == "400:5"
    assert doc["switches"][0]["positions"] == ["on", "off"]
    assert doc["at"] == "2024-03-05T10:00:00Z"
    assert (doc["flag"], doc["n"], doc["x"]) == (True, 12, 0.5)


def test_yaml_and_json_give_the_same_document(tmp_path):
    import yaml

    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(good(), sort_keys=False))
    assert load_site_file(path) == good()
    path = tmp_path / "site.json"
    path.write_text(json.dumps(good()))
    assert load_site_file(path) == good()


def test_file_with_byte_order_mark_and_bad_encoding(tmp_path):
    path = tmp_path / "bom.json"
    path.write_bytes(b"\xef\xbb\xbf" + json.dumps(good()).encode())
    assert load_site_file(path) == good()
    path.write_bytes(b'{"site": "\xff"}')
    with pytest.raises(SiteFileParseError, match="not UTF-8 text"):
        load_site_file(path)


def test_text_that_is_not_json_is_read_as_yaml():
    assert load_site_text("format: loopkeep.site/1\n") == {"format": "loopkeep.site/1"}


# --- schema -------------------------------------------------------------------------------


def test_schema_is_valid_draft_2020_12():
    schema = load_schema()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)


def test_schema_lists_every_operation_of_the_design():
    branches = load_schema()["$defs"]["operation"]["oneOf"]
    assert [b["required"][0] for b in branches] == [
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
    ]


def gate_passes(doc: dict) -> bool:
    """Whether the fast gate alone would let ``doc`` through (no worded check)."""
    return fast_path_allowed(plain_json(doc)) and schema_gate(load_schema())(doc)


@pytest.mark.parametrize(("edit", "expected"), [c[1:] for c in BAD], ids=[c[0] for c in BAD])
def test_fast_gate_agrees_with_jsonschema(edit, expected):
    # The jsonschema-rs gate lets good parts skip jsonschema; it must never pass what
    # jsonschema (the reference implementation of the draft) rejects.
    doc = good()
    edit(doc)
    assert gate_passes(doc) == jsonschema.Draft202012Validator(load_schema()).is_valid(doc)


_leaf = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-3, 7),
    st.floats(-2, 2, allow_nan=False),
    st.sampled_from(["", "X1", "a b", "TB-101:1", "closed", "C400", "5", "open"]),
    st.lists(st.sampled_from(["X1", "X4", "TB-101:1", 1]), max_size=3),
    # a fresh dict per draw: one shared {} could be set inside itself by two edits
    st.builds(dict),
)


def _paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, (*prefix, i))


_ALL_PATHS = [p for p in _paths(good()) if p]


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(_ALL_PATHS), _leaf), min_size=1, max_size=3))
def test_fast_gate_agrees_with_jsonschema_on_random_edits(edits):
    doc = good()
    for path, value in edits:
        node = doc
        try:
            for token in path[:-1]:
                node = node[token]
            node[path[-1]] = value
        except (KeyError, IndexError, TypeError):
            continue
    valid = jsonschema.Draft202012Validator(load_schema()).is_valid(doc)
    assert gate_passes(doc) == valid
    # ...and the worded list is empty exactly when jsonschema finds nothing structural.
    if not valid:
        assert lines(doc)


# --- the demo -----------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["quillfen.json", "orrinvale.json"])
def test_demo_sites_validate_clean(name):
    assert lines(load_site_file(DEMO / name)) == []


def test_demo_has_about_forty_cts_and_the_intended_parts():
    docs = [load_site_file(DEMO / n) for n in ("quillfen.json", "orrinvale.json")]
    cts = [ct for d in docs for ct in d["cts"]]
    assert len(cts) == 40
    kinds = {s["kind"] for d in docs for s in d["switches"]}
    assert {"test_switch_pole", "draw_out_case", "shorting_screw", "slide_link"} <= kinds
    assert any(len(ct["terminals"]) > 2 for ct in cts)  # multi-ratio
    assert any(len(ct["terminals"]) == 2 for ct in cts)  # single-ratio
    assert sum(1 for ct in cts if ct.get("tap_changes")) >= 3
    functions = {f for d in docs for dev in d["devices"] for f in dev.get("functions", [])}
    assert {"50N", "51N", "87B", "87T"} <= functions


# What each demo procedure is written to show (fixtures/demo/README.md). The rules are the
# trade's (common practice, no source): isolate the trips of every relay whose current will
# change, then short the CT at a shorting provision, and only then open, lift or remove.
DEMO_VERDICTS = [
    ("quillfen.json", "P-R131-CASE", None),
    ("quillfen.json", "P-R132-OUT", None),
    ("quillfen.json", "P-R132-OUT-DRAFT", (2, "trip_not_isolated", None, "R-132N")),
    ("quillfen.json", "P-R133-OUT-DRAFT", (3, "open_secondary", "CB-133-A", None)),
    ("quillfen.json", "P-87B-CB131-OUT", None),
    ("quillfen.json", "P-87B-CB131-DRAFT", (1, "trip_not_isolated", None, "R-87B")),
    ("orrinvale.json", "P-RLL1-CASE", None),
    ("orrinvale.json", "P-ML1-SWAP-DRAFT", (1, "open_secondary", "L1-MA", None)),
    ("orrinvale.json", "P-ML1-SWAP", None),
    ("orrinvale.json", "P-RT2-BENCH", None),
    pytest.param(
        "orrinvale.json",
        "P-L2-OUTAGE",
        None,
    ),
]


@pytest.mark.parametrize(("name", "code", "danger"), DEMO_VERDICTS)
def test_demo_procedures_get_the_intended_verdict(name, code, danger):
    from analysis.engine import build_netlist, check_procedure

    doc = load_site_file(DEMO / name)
    verdict = check_procedure(build_netlist(doc), code).to_json(doc)
    if danger is None:
        assert verdict["safe"] is True
        assert verdict["first_danger"] is None
        return
    step, finding, ct, device = danger
    assert verdict["safe"] is False
    assert (verdict["first_danger"]["step"], verdict["first_danger"]["code"]) == (step, finding)
    found = [f for f in verdict["steps"][step]["findings"] if f["code"] == finding]
    assert any(f["ct"] == ct and f["device"] == device for f in found)
    assert verdict["cautions"]


@pytest.mark.parametrize("char", ["\x1c", "\x1d", "\x1e", "\x1f", "\x85", "\ufeff", "\u2003"])
def test_spaces_the_two_regex_engines_disagree_on_are_judged_as_jsonschema_does(char):
    # Python's re and jsonschema-rs's regex crate differ on what ``\s`` matches (U+001C..1F,
    # U+0085, U+FEFF; found by trying every code point); such documents skip the fast gate, so
    # a code holding one is refused exactly when jsonschema refuses it.
    doc = good()
    doc["cts"][0]["code"] = f"CB{char}101-A"
    schema_valid = jsonschema.Draft202012Validator(load_schema()).is_valid(doc)
    code_errors = [line for line in lines(doc) if line.startswith("/cts/0/code:")]
    assert bool(code_errors) == (not schema_valid)
    # An em space (U+2003) is a space to both, so it may take the fast path.
    assert fast_path_allowed(plain_json(doc)) == (char == "\u2003")
