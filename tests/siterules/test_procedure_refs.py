"""One rule for what a procedure may name (``siterules.procedure_refs``): the site-file import
refuses exactly the steps the engine refuses, with the same pointers and words, and ``lift`` /
``land`` act on links (slide links, bars) as they do on wires.

The expectations are rules of the trade (common practice, no source): a CT secondary must
never be opened while its CT is live; a link is as much a part of the secondary circuit as a
wire, so lifting it opens the circuit unless the CT is shorted upstream first."""

from __future__ import annotations

import pytest

from analysis.engine import ProcedureError, build_netlist, check_operations, check_procedure
from inventory.sitefile.validate import validate_site_document
from siterules.procedure_refs import RecordNames, procedure_problems
from tests.analysis.engine.builders import wye_panel

# A procedure with one mistake of every kind the rule knows, each in a step of its own.
BAD_STEPS = [
    {"set": "TS-1/T1", "to": "open"},
    {"set": "TS-1/D", "to": "open"},  # no such switch
    {"set": "TS-1/A", "to": "shorted"},  # no such position
    {"add_jumper": ["TB-1:A", "TB-1:Q"], "id": "J1"},  # no such terminal
    {"add_jumper": ["TB-1:B", "TB-1:N"], "id": "J5"},
    {"add_jumper": ["TB-1:C", "TB-1:N"], "id": "J5"},  # J5 is in place
    {"remove_jumper": "J9"},  # never added
    {"lift": ["TB-1:A", "TB-1:B"]},  # nothing joins them
    {"lift": ["TS-1:AR", "R-1:IA1"]},  # a link: fine
    {"lift": ["R-1:IA1", "TS-1:AR"]},  # the same link, already lifted
    {"land": ["CB-1-A:X1", "TB-1:A"]},  # a wire that was never lifted
    {"remove_device": "R-2"},
    {"energize": "CB-2"},
]


def _doc():
    b = wye_panel(test_switch=True, trip=True)
    b.procedure("P-OK", [{"set": "TS-1/T1", "to": "open"}], ("R-1",))
    b.procedure("P-BAD", BAD_STEPS, ("R-1", "R-2"))
    return b.build()


def test_import_and_engine_refuse_the_same_steps_with_the_same_words():
    doc = _doc()
    at_import = [str(e) for e in validate_site_document(doc)]
    assert at_import == [
        "/procedures/1/devices/1: unknown device 'R-2' (did you mean 'R-1'?)",
        "/procedures/1/steps/1/set: unknown switch 'TS-1/D' (did you mean 'TS-1/A' or "
        "'TS-1/B' or 'TS-1/C'?)",
        "/procedures/1/steps/2/to: switch 'TS-1/A' has no position 'shorted' (it has closed, open)",
        "/procedures/1/steps/3/add_jumper/1: the record has no terminal 'TB-1:Q': nothing is "
        "wired, linked or switched there (did you mean 'TB-1:A' or 'TB-1:B' or 'TB-1:C'?)",
        "/procedures/1/steps/5/id: jumper 'J5' is already in place (added at "
        "/procedures/1/steps/4); give this jumper an id of its own",
        "/procedures/1/steps/6/remove_jumper: no earlier step adds a jumper 'J9' (jumpers in "
        "place: 'J1', 'J5')",
        "/procedures/1/steps/7/lift: no wire or link joins TB-1:A and TB-1:B; lift names the "
        "two ends of a wire or link of this site",
        "/procedures/1/steps/9/lift: the link between R-1:IA1 and TS-1:AR is already lifted "
        "(at /procedures/1/steps/8)",
        "/procedures/1/steps/10/land: the wire between CB-1-A:X1 and TB-1:A is not lifted (no "
        "earlier step lifts it)",
        "/procedures/1/steps/11/remove_device: unknown device 'R-2' (did you mean 'R-1'?)",
        "/procedures/1/steps/12/energize: unknown equipment 'CB-2' (did you mean 'CB-1'?)",
    ]
    with pytest.raises(ProcedureError) as caught:
        check_procedure(build_netlist(doc), "P-BAD")
    # the engine lists the same problems, each line led by the step as the verdict numbers it
    lines = str(caught.value).splitlines()
    assert [line.split(" (", 1)[1].replace("): ", ": ", 1) for line in lines[1:]] == list(
        at_import[1:]
    )
    assert lines[0] == at_import[0]
    assert lines[1].startswith("step 2 (/procedures/1/steps/1/set): unknown switch 'TS-1/D'")
    assert [p.pointer("procedures", 1) for p in caught.value.problems][-1] == (
        "/procedures/1/steps/12/energize"
    )
    # the good procedure of the same file is checked
    assert check_procedure(build_netlist(doc), "P-OK").safe


def test_sequences_the_rule_accepts():
    """An id may be used again once its jumper is removed; a wire or link may be lifted,
    landed and lifted again. (A jumper added without an id, which only an unsaved procedure
    may do, is J<step number>.)"""
    doc = wye_panel(test_switch=True, trip=True).build()
    names = build_netlist(doc)
    ops = [
        {"set": "TS-1/T1", "to": "open"},
        {"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J2"},
        {"remove_jumper": "J2"},
        {"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J2"},
        {"lift": ["TS-1:AR", "R-1:IA1"]},
        {"land": ["R-1:IA1", "TS-1:AR"]},
        {"lift": ["TS-1:AR", "R-1:IA1"]},
        {"land": ["TS-1:AR", "R-1:IA1"]},
        {"remove_jumper": "J2"},
        {"set": "TS-1/T1", "to": "closed"},
    ]
    doc["procedures"] = [{"code": "P-1", "title": "t", "devices": ["R-1"], "steps": ops}]
    assert validate_site_document(doc) == []
    assert check_operations(names, ops, ["R-1"]).safe
    unsaved = [{"add_jumper": ["TB-1:A", "TB-1:N"]}, {"remove_jumper": "J1"}]
    assert check_operations(names, unsaved).steps[2].op == {"remove_jumper": "J1"}


def test_the_rule_alone_on_plain_names():
    names = RecordNames(
        terminals=frozenset({"A:1", "A:2", "B:1"}),
        switches={"S/1": ("closed", "open")},
        devices=frozenset({"R"}),
        equipment=frozenset({"E"}),
        wires=frozenset({frozenset({"A:1", "A:2"})}),
        links=frozenset({frozenset({"A:2", "B:1"})}),
    )
    problems = procedure_problems(
        names, [{"land": ["A:1", "A:2"]}], prefix=("procedures", 0), lifted={}
    )
    assert [str(p) for p in problems] == [
        "/steps/0/land: the wire between A:1 and A:2 is not lifted (no earlier step lifts it)"
    ]
    assert problems[0].pointer("procedures", 0) == "/procedures/0/steps/0/land"
    # a starting state with the wire lifted (e.g. a procedure continuing another one)
    assert (
        procedure_problems(names, [{"land": ["A:1", "A:2"]}], lifted={frozenset({"A:1", "A:2"})})
        == []
    )


def _open_cts(verdict, step):
    return sorted(f.ct for f in verdict.steps[step].findings if f.code == "open_secondary")


def test_lifting_a_slide_link_of_a_live_ct_opens_its_secondary_and_landing_closes_it():
    """CB-1-A's secondary runs X1 → lead → TB-1:A → TS-1/A knife → TS-1:AR → link → R-1:IA1.
    The link is the only path on: lifting it with the CT live opens the secondary (danger);
    landing it closes it again. Shorted first at the test switch (TS-1/A open shorts TB-1:A to
    TB-1:N through the jaw), the same lift is safe: the CT's current flows in the short."""
    nl = build_netlist(wye_panel(test_switch=True, trip=True).build())
    link = ["TS-1:AR", "R-1:IA1"]
    v = check_operations(nl, [{"lift": link}, {"land": link}])
    assert _open_cts(v, 1) == ["CB-1-A"]
    assert v.first_danger["code"] == "open_secondary" and v.first_danger["step"] == 1
    assert _open_cts(v, 2) == []

    shorted = [
        {"set": "TS-1/T1", "to": "open"},
        {"set": "TS-1/A", "to": "open"},
        {"lift": link},
        {"land": link},
        {"set": "TS-1/A", "to": "closed"},
        {"set": "TS-1/T1", "to": "closed"},
    ]
    v = check_operations(nl, shorted, ["R-1"])
    assert all(_open_cts(v, s) == [] for s in range(len(shorted) + 1))
    assert v.safe
