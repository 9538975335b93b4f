"""Hand-built scenarios: every state finding code and every operation, exact expectations.

The rules are those of design.md's findings table; the panel is the wye set of builders.py
(CB-1 at 320 A maximum load, CTs at 400:5, so 4.00 A secondary per phase; design.md, state
currents). "common practice, no source" applies to the circuit rules themselves (one ground
point per circuit is S20/S21).
"""

from __future__ import annotations

import pytest

from analysis.engine import ProcedureError, build_netlist, check_operations
from tests.analysis.engine.builders import SiteBuilder, wye_panel


def _codes(verdict, step: int) -> list[tuple[str, str | None, str | None, str | None]]:
    return [(f.code, f.stage, f.ct or f.device, f.input) for f in verdict.steps[step].findings]


@pytest.fixture
def panel():
    return build_netlist(wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2).build())


# --- open_secondary -------------------------------------------------------------------------


def test_lifting_a_live_lead_opens_the_secondary_with_its_current(panel):
    v = check_operations(panel, [{"lift": ["CB-1-A:X1", "TB-1:A"]}, {"note": "wait"}])
    first = v.steps[1].findings[0]
    assert (first.code, first.stage, first.ct) == ("open_secondary", "after", "CB-1-A")
    assert "4.00 A secondary" in first.message and "320 A" in first.message
    # reported in every state where it holds
    assert ("open_secondary", "after", "CB-1-A", None) in _codes(v, 2)
    assert v.first_danger == {
        "step": 1,
        "stage": "after",
        "code": "open_secondary",
        "ct": "CB-1-A",
        "device": None,
        "input": None,
    }
    assert not v.safe


def test_a_dead_ct_may_be_opened_and_energizing_it_open_is_flagged(panel):
    v = check_operations(
        panel,
        [
            {"deenergize": "CB-1"},
            {"lift": ["CB-1-A:X1", "TB-1:A"]},
            {"energize": "CB-1"},
            {"land": ["CB-1-A:X1", "TB-1:A"]},
        ],
    )
    assert [f.code for f in v.steps[2].findings] == []
    # energized with R-1's trip connected: IA carries 0 A and the residual IN phase B + C's
    # 4.00 A (Kirchhoff, from memory) against 4.00 A and 0 A normally (common practice, no
    # source)
    assert [(f.code, f.ct or f.device, f.input) for f in v.steps[3].findings] == [
        ("open_secondary", "CB-1-A", None),
        ("trip_not_isolated", "R-1", "IA"),
    ]
    assert "input IA (and IN) carries 0 A against 4.00 A" in v.steps[3].findings[1].message
    assert [f.code for f in v.steps[4].findings if f.code == "open_secondary"] == []


def test_an_open_ct_in_the_normal_state_is_listed_at_step_0():
    b = wye_panel()
    b.doc["wires"] = [w for w in b.doc["wires"] if w["from"] != "CB-1-B:X1"]
    v = check_operations(build_netlist(b.build()), [{"note": "look"}], ["R-1"])
    assert [(f.code, f.stage, f.ct) for f in v.steps[0].findings] == [
        ("open_secondary", "before", "CB-1-B")
    ]


# --- transitions ----------------------------------------------------------------------------


def test_make_before_break_pole_shorts_before_it_opens(panel):
    v = check_operations(panel, [{"set": "TS-1/T1", "to": "open"}, {"set": "TS-1/A", "to": "open"}])
    codes = [f.code for f in v.steps[2].findings]
    assert "open_secondary" not in codes
    assert v.safe


def test_break_before_make_pole_opens_the_ct_during_its_transition():
    nl = build_netlist(wye_panel(test_switch=True, transition="break_before_make").build())
    v = check_operations(nl, [{"set": "TS-1/B", "to": "open"}])
    assert [(f.code, f.stage, f.ct) for f in v.steps[1].findings if f.code == "open_secondary"] == [
        ("open_secondary", "transition", "CB-1-B")
    ]
    assert v.first_danger == {
        "step": 1,
        "stage": "transition",
        "code": "open_secondary",
        "ct": "CB-1-B",
        "device": None,
        "input": None,
    }


def test_simultaneous_switch_has_no_transition_state():
    nl = build_netlist(wye_panel(test_switch=True, transition="simultaneous").build())
    v = check_operations(nl, [{"set": "TS-1/B", "to": "open"}])
    assert {f.stage for f in v.steps[1].findings} == {"after"}
    assert v.safe


# --- trip_not_isolated ----------------------------------------------------------------------


def test_rule_a_input_change_of_the_device_worked_on_while_its_trip_is_connected(panel):
    v = check_operations(panel, [{"set": "TS-1/A", "to": "open"}], ["R-1"])
    trips = [f for f in v.steps[1].findings if f.code == "trip_not_isolated"]
    assert [(f.stage, f.device, f.input) for f in trips] == [
        ("transition", "R-1", "IA"),
        ("after", "R-1", "IA"),
    ]
    assert "4.00 A to 0 A" in trips[1].message and "CB-1:TC" in trips[1].message


def test_rule_a_device_removed_while_its_trip_is_connected(panel):
    ops = (
        [{"set": "TS-1/T1", "to": "open"}]
        + [{"set": f"TS-1/{p}", "to": "open"} for p in "ABC"]
        + [{"set": "TS-1/T1", "to": "closed"}, {"remove_device": "R-1"}]
    )
    v = check_operations(panel, ops, ["R-1"])
    # no current changes at step 5, but the trip comes back while the inputs are still shorted
    # (restore the CT circuits before the trips; common practice, no source)
    (early,) = v.steps[5].findings
    assert (early.code, early.stage, early.device, early.input) == (
        "trip_not_isolated",
        "after",
        "R-1",
        "IA",
    )
    assert "input IA (and IB, IC) carries 0 A against 4.00 A" in early.message
    (f,) = [f for f in v.steps[6].findings if f.code == "trip_not_isolated"]
    assert "R-1, a device the work is for, is removed" in f.message
    # with the trip isolated the same removal is safe
    ok = check_operations(panel, [*ops[:4], {"remove_device": "R-1"}], ["R-1"])
    assert ok.safe


def test_rule_b_differential_relay_sees_its_current_change():
    b = SiteBuilder()
    b.equipment("CB", max_load_a=400)
    b.ct("CT", equipment="CB")
    b.device(
        "R87",
        functions=("87B",),
        inputs=[("IA", "R87:1", "R87:2", 0.1)],
        outputs=[("TRIP", "R87:T", "86B:1")],
    )
    b.wire("R87:T", "86B:1", 1.0)
    b.device("M", kind="meter", functions=("ammeter",), inputs=[("IA", "M:1", "M:2", 0.1)])
    b.wire("CT:X1", "R87:1", 0.2)
    b.link("R87:2", "M:1")
    b.wire("M:2", "CT:X2", 0.2)
    b.ground("M:2")
    nl = build_netlist(b.build())
    v = check_operations(nl, [{"add_jumper": ["CT:X1", "M:1"], "id": "J1"}], ["M"])
    (f,) = [f for f in v.steps[1].findings if f.code == "trip_not_isolated"]
    assert (f.device, f.input) == ("R87", "IA")
    assert "differential" in f.message
    # shorting the meter alone leaves the differential current as it was (a CT is a current
    # source), so no trip finding
    v2 = check_operations(nl, [{"add_jumper": ["M:1", "M:2"], "id": "J1"}], ["M"])
    assert [f.code for f in v2.steps[1].findings if f.code == "trip_not_isolated"] == []


def test_rule_c_residual_current_appears_when_one_phase_is_shorted_upstream(panel):
    """Shorting phase A at the terminal block: B + C (4 A together, at 180°) come back to the
    neutral through IN (0.2 Ω) and through IA (0.1 Ω), now joined to the neutral at the
    terminal block, in inverse ratio: 1/3 of 4 A through IN, a false ground current where
    there was none (design.md rule (c); the split by hand, common practice, no source)."""
    v = check_operations(panel, [{"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J1"}])
    trips = [f for f in v.steps[1].findings if f.code == "trip_not_isolated"]
    assert [(f.device, f.input) for f in trips] == [("R-1", "IN")]
    assert "rise above its normal value" in trips[0].message
    assert trips[0].circuit == "CKT-CB-1-A"  # trip findings carry their circuit
    assert trips[0].numbers["normal_a"] == pytest.approx(0.0, abs=1e-9)
    assert trips[0].numbers["from_a"] == pytest.approx(0.0, abs=1e-9)
    assert trips[0].numbers["to_a"] == pytest.approx(4.0 / 3.0, abs=1e-4)


# --- trip reconnected while an input is abnormal --------------------------------------------


def residual_panel(*, selector: bool = False, transition: str = "make_before_break"):
    """Wye set CB-1-A/B/C (320 A, 400:5: 4.00 A per phase) into phase relay R-50 (50/51,
    IA/IB/IC) in series with the residual ground relay R-50N (50N/51N, IN in the neutral), the
    feeder arrangement of fixtures/demo. Test switch TS-1: CT poles /A /B /C with shorting jaws
    to the neutral; trip poles /T1 (R-50) and /T2 (R-50N). With ``selector`` R-50N trips
    through SEL, a make-before-break selector whose two contacts are in series on the trip
    path, so that its trip is made during the transition only."""
    b = SiteBuilder("RES")
    b.equipment("CB-1", max_load_a=320)
    b.block("TB-1")
    for p in "ABC":
        b.ct(f"CB-1-{p}", equipment="CB-1", phase=p, set_name="CB-1-R")
        b.link(f"CB-1-{p}:X2", "CB-1:STAR")
        b.wire(f"CB-1-{p}:X1", f"TB-1:{p}", 0.5)
        b.ct_pole(f"TS-1/{p}", f"TB-1:{p}", f"TS-1:{p}R", "TS-1:SB", transition=transition)
        b.link(f"TS-1:{p}R", f"R-50:I{p}1")
        b.link(f"R-50:I{p}2", "R-50:N")
    b.wire("CB-1:STAR", "TB-1:N", 0.5)
    b.ground("TB-1:N")
    b.link("TS-1:SB", "TB-1:N")
    b.device(
        "R-50",
        functions=("50", "51"),
        inputs=[(f"I{p}", f"R-50:I{p}1", f"R-50:I{p}2", 0.1) for p in "ABC"],
        outputs=[("TRIP", "R-50:T", "CB-1:TC")],
    )
    b.device(
        "R-50N",
        functions=("50N", "51N"),
        inputs=[("IN", "R-50N:1", "R-50N:2", 0.2)],
        outputs=[("TRIP", "R-50N:T", "CB-1:TC")],
    )
    b.link("R-50:N", "R-50N:1")
    b.link("R-50N:2", "TB-1:N")
    b.trip_pole("TS-1/T1", "R-50:T", "TS-1:T1R")
    b.wire("TS-1:T1R", "CB-1:TC", 1.0)
    if selector:
        b.switch(
            "SEL",
            [("R-50N:T", "SEL:M", ("a",)), ("SEL:M", "CB-1:TC", ("b",))],
            kind="selector",
            positions=("a", "b"),
            normal="a",
            transition="make_before_break",
        )
    else:
        b.trip_pole("TS-1/T2", "R-50N:T", "TS-1:T2R")
        b.wire("TS-1:T2R", "CB-1:TC", 1.0)
    return b


ISOLATE_ALL = [
    {"set": "TS-1/T1", "to": "open"},
    {"set": "TS-1/T2", "to": "open"},
    *({"set": f"TS-1/{p}", "to": "open"} for p in "ABC"),
]


def test_residual_trip_restored_with_two_phases_still_shorted_is_flagged():
    """Phase A restored, B and C still shorted at TS-1: all of phase A's 4.00 A comes back
    through IN (the only return from the relay star; Kirchhoff, from memory) where the
    balanced normal state puts 0 A. Reconnecting the 50N trip then is flagged (restore the CT
    circuits, verify, then restore the trips; common practice, no source)."""
    nl = build_netlist(residual_panel().build())
    ops = [
        *ISOLATE_ALL,
        {"set": "TS-1/A", "to": "closed"},
        {"set": "TS-1/T2", "to": "closed"},
    ]
    v = check_operations(nl, ops, ["R-50"])
    assert [f.code for f in v.steps[6].findings] == []  # IN goes 0 A -> 4 A with its trip open
    (f,) = v.steps[7].findings
    assert (f.code, f.severity, f.stage, f.device, f.input) == (
        "trip_not_isolated",
        "danger",
        "after",
        "R-50N",
        "IN",
    )
    assert f.message == (
        "R-50N output TRIP (R-50N:T → CB-1:TC) is reconnected while input IN carries 4.00 A "
        "against 0 A with the CT circuits in their normal state (more than 10 % of the "
        "circuit's largest CT current, 4.00 A, apart): restore the CT circuits before the trips"
    )
    assert f.numbers["now_a"] == pytest.approx(4.0, abs=1e-6)
    assert f.numbers["normal_a"] == pytest.approx(0.0, abs=1e-6)
    assert v.first_danger == {
        "step": 7,
        "stage": "after",
        "code": "trip_not_isolated",
        "ct": None,
        "device": "R-50N",
        "input": "IN",
    }


def test_residual_trip_restored_after_every_phase_is_not_flagged():
    nl = build_netlist(residual_panel().build())
    restore = [
        *({"set": f"TS-1/{p}", "to": "closed"} for p in "ABC"),
        {"set": "TS-1/T1", "to": "closed"},
        {"set": "TS-1/T2", "to": "closed"},
    ]
    v = check_operations(nl, [*ISOLATE_ALL, *restore], ["R-50"])
    assert v.safe
    assert [f.code for _, f in v.findings if f.code == "trip_not_isolated"] == []


def test_phase_trip_restored_before_its_own_poles_names_the_first_input():
    """R-50's trip back with every phase shorted: IA, IB, IC carry 0 A against 4.00 A."""
    nl = build_netlist(residual_panel().build())
    v = check_operations(nl, [*ISOLATE_ALL, {"set": "TS-1/T1", "to": "closed"}], ["R-50"])
    (f,) = v.steps[6].findings
    assert (f.code, f.device, f.input) == ("trip_not_isolated", "R-50", "IA")
    assert "input IA (and IB, IC) carries 0 A against 4.00 A" in f.message


def test_trip_made_during_a_transition_only_is_flagged_in_the_transition():
    """SEL makes R-50N's trip path while it moves (both contacts closed) and breaks it again
    after; with phase B shorted, IN carries phase B's 4.00 A at that moment."""
    nl = build_netlist(residual_panel(selector=True).build())
    bad = check_operations(
        nl,
        [
            {"set": "TS-1/T1", "to": "open"},
            {"set": "TS-1/B", "to": "open"},
            {"set": "SEL", "to": "b"},
        ],
        ["R-50"],
    )
    trips = [(f.stage, f.device, f.input) for f in bad.steps[3].findings]
    assert trips == [("transition", "R-50N", "IN")]
    assert "carries 4.00 A against 0 A" in bad.steps[3].findings[0].message
    # with the secondary as normal the same movement is no finding
    ok = check_operations(nl, [{"set": "SEL", "to": "b"}], ["R-50"])
    assert ok.steps[1].findings == ()


def test_trip_restored_with_the_primary_dead_compares_with_the_dead_normal_state():
    """With CB-1 de-energized no CT drives anything in any arrangement of the secondary, so
    the reconnection is compared with a dead normal state and is not flagged."""
    nl = build_netlist(residual_panel().build())
    ops = [{"deenergize": "CB-1"}, *ISOLATE_ALL, {"set": "TS-1/T2", "to": "closed"}]
    v = check_operations(nl, ops, ["R-50"])
    assert [f.code for f in v.steps[7].findings] == []


# --- equipment energized while a connected device's input is abnormal ----------------------

SHORT_A_DEAD = [
    {"deenergize": "CB-1"},
    {"set": "TS-1/T1", "to": "open"},
    {"set": "TS-1/T2", "to": "open"},
    {"set": "TS-1/A", "to": "open"},
    {"set": "TS-1/T1", "to": "closed"},
    {"set": "TS-1/T2", "to": "closed"},
]


def test_energizing_with_one_phase_shorted_and_the_trips_connected_is_flagged():
    """CB-1 dead, phase A shorted at TS-1, both trips reclosed (no finding: nothing is live),
    then CB-1 energized. B and C return through IN (IA is cut off at the open knife), so IN
    carries |I_B + I_C| = |I_A| = 4.00 A (Kirchhoff, from memory) against 0 A in the balanced
    normal state: the 50N trips CB-1 as it closes. R-50's IA carries 0 A against 4.00 A
    (energize with the CT circuits as normal, or with the trips isolated; common practice,
    no source)."""
    nl = build_netlist(residual_panel().build())
    v = check_operations(nl, [*SHORT_A_DEAD, {"energize": "CB-1"}], ["R-50"])
    assert [f.code for f in v.steps[6].findings] == []
    trips = [f for f in v.steps[7].findings if f.code == "trip_not_isolated"]
    assert [(f.severity, f.stage, f.device, f.input) for f in trips] == [
        ("danger", "after", "R-50", "IA"),
        ("danger", "after", "R-50N", "IN"),
    ]
    f = trips[1]
    assert f.message == (
        "CB-1 is energized while R-50N output TRIP (R-50N:T → CB-1:TC) is connected and input "
        "IN carries 4.00 A against 0 A with the CT circuits in their normal state (more than "
        "10 % of the circuit's largest CT current, 4.00 A, apart): isolate the trips or "
        "restore the CT circuits before energizing"
    )
    assert f.numbers["now_a"] == pytest.approx(4.0, abs=1e-6)
    assert f.numbers["normal_a"] == pytest.approx(0.0, abs=1e-6)
    assert f.numbers["energized"] == ["CB-1"]
    assert "input IA carries 0 A against 4.00 A" in trips[0].message
    assert v.first_danger == {
        "step": 7,
        "stage": "after",
        "code": "trip_not_isolated",
        "ct": None,
        "device": "R-50",
        "input": "IA",
    }


def test_energizing_after_the_shorted_phase_is_restored_is_not_flagged():
    nl = build_netlist(residual_panel().build())
    ops = [*SHORT_A_DEAD, {"set": "TS-1/A", "to": "closed"}, {"energize": "CB-1"}]
    v = check_operations(nl, ops, ["R-50"])
    assert [f.code for f in v.steps[8].findings] == []
    assert v.safe


def test_energizing_with_every_ct_circuit_normal_is_not_flagged():
    nl = build_netlist(residual_panel().build())
    v = check_operations(nl, [{"deenergize": "CB-1"}, {"energize": "CB-1"}], ["R-50"])
    assert [f.code for f in v.steps[2].findings] == []
    assert v.safe


# --- input_bypassed, first appearance only --------------------------------------------------


def test_bypassed_input_names_the_functions_lost_once(panel):
    v = check_operations(
        panel,
        [
            {"set": "TS-1/T1", "to": "open"},
            {"add_jumper": ["R-1:IA1", "R-1:IA2"], "id": "J1"},
            {"note": "still bypassed"},
            {"remove_jumper": "J1"},
        ],
    )
    (f,) = v.steps[2].findings
    assert (f.code, f.severity, f.device, f.input) == ("input_bypassed", "caution", "R-1", "IA")
    # CT A's current still reaches the measured residual input IN through the jumper, so the
    # ground elements keep their current; the phase elements lose phase A (common practice,
    # no source)
    assert "functions 50/51 lose" in f.message and "4.00 A" in f.message
    assert v.steps[3].findings == ()
    assert v.steps[4].findings == ()
    assert v.safe


# --- partial_winding_short ------------------------------------------------------------------


def _multi_ratio():
    b = SiteBuilder()
    b.equipment("CB", max_load_a=320)
    # 600:5 positions (S4), tap X1-X4 = 400:5
    b.ct(
        "CT",
        equipment="CB",
        terminals={"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600},
        in_use=("X1", "X4"),
    )
    b.device("R", inputs=[("IA", "R:1", "R:2", 0.1)])
    b.wire("CT:X1", "R:1", 0.3)
    b.wire("R:2", "CT:X4", 0.3)
    b.ground("R:2")
    return build_netlist(b.build())


def test_shorting_a_section_outside_the_tap_is_a_partial_winding_short():
    v = check_operations(_multi_ratio(), [{"add_jumper": ["CT:X4", "CT:X5"], "id": "J1"}])
    (f,) = v.steps[1].findings
    assert (f.code, f.severity, f.ct) == ("partial_winding_short", "warning", "CT")
    assert "X4-X5 (400-600 A, 40 turns, outside the tap in use)" in f.message
    # the figures are worked out in test_windings.py (ampere-turn balance of one core)
    assert "the tap in use delivers 1.23 A instead of 4.00 A" in f.message


def test_a_section_inside_the_tap_is_reported_and_a_dead_ct_is_not():
    nl = _multi_ratio()
    (f,) = check_operations(nl, [{"add_jumper": ["CT:X2", "CT:X3"], "id": "J1"}]).steps[1].findings
    assert (f.code, f.ct) == ("partial_winding_short", "CT")
    assert "X2-X3 (100-150 A, 10 turns, inside the tap in use)" in f.message
    dead = check_operations(
        nl, [{"deenergize": "CB"}, {"add_jumper": ["CT:X4", "CT:X5"], "id": "J1"}]
    )
    assert [f.code for f in dead.steps[2].findings] == []


# --- no_ground / multiple_grounds -----------------------------------------------------------


def test_lifting_the_only_ground_leaves_no_ground_and_a_second_ground_is_multiple():
    b = wye_panel(ground=False)
    b.wire("TB-1:N", "TB-1:G", 0.0)
    b.ground("TB-1:G")
    b.ground("TB-9:G")
    nl = build_netlist(b.build())
    v = check_operations(
        nl,
        [
            {"lift": ["TB-1:N", "TB-1:G"]},
            {"note": "x"},
            {"land": ["TB-1:N", "TB-1:G"]},
            {"add_jumper": ["TB-1:A", "TB-9:G"], "id": "J1"},
        ],
    )
    assert v.steps[0].findings == ()
    assert [(f.code, f.circuit) for f in v.steps[1].findings] == [("no_ground", "CKT-CB-1-A")]
    assert v.steps[2].findings == ()  # already present before the step
    assert v.steps[3].findings == ()
    (f,) = [f for f in v.steps[4].findings if f.code == "multiple_grounds"]
    assert f.circuit == "CKT-CB-1-A" and "2 points" in f.message
    assert "TB-1:G" in f.message and "TB-9:G" in f.message


def test_a_circuit_without_ground_is_listed_at_step_0():
    v = check_operations(build_netlist(wye_panel(ground=False).build()), [], ["R-1"])
    assert [(f.code, f.stage) for f in v.steps[0].findings] == [("no_ground", "before")]


# --- operations -----------------------------------------------------------------------------


def test_remove_and_insert_device_without_a_short_opens_the_cts(panel):
    v = check_operations(panel, [{"remove_device": "R-1"}, {"insert_device": "R-1"}])
    assert sorted(f.ct for f in v.steps[1].findings if f.code == "open_secondary") == [
        "CB-1-A",
        "CB-1-B",
        "CB-1-C",
    ]
    assert [f.code for f in v.steps[2].findings if f.code == "open_secondary"] == []


def test_lifting_a_link_is_supported(panel):
    v = check_operations(panel, [{"lift": ["TB-1:N", "R-1:NR"]}])
    assert sorted(f.ct for f in v.steps[1].findings if f.code == "open_secondary") == [
        "CB-1-A",
        "CB-1-B",
        "CB-1-C",
    ]


@pytest.mark.parametrize(
    ("op", "message"),
    [
        (
            {"set": "TS-9/A", "to": "open"},
            "step 1 (/steps/0/set): unknown switch 'TS-9/A' (did you mean 'TS-1/A'",
        ),
        (
            {"set": "TS-1/A", "to": "half"},
            "step 1 (/steps/0/to): switch 'TS-1/A' has no position 'half' (it has closed, open)",
        ),
        (
            {"remove_jumper": "J7"},
            "step 1 (/steps/0/remove_jumper): no earlier step adds a jumper 'J7' (jumpers in "
            "place: none)",
        ),
        (
            {"add_jumper": ["TB-1:A", "TB-7:1"], "id": "J1"},
            "step 1 (/steps/0/add_jumper/1): the record has no terminal 'TB-7:1': nothing is "
            "wired, linked or switched there (did you mean 'TB-1:A' or 'TB-1:B' or 'TB-1:C'?)",
        ),
        (
            {"lift": ["TB-1:A", "TB-1:B"]},
            "step 1 (/steps/0/lift): no wire or link joins TB-1:A and TB-1:B; lift names the "
            "two ends of a wire or link of this site",
        ),
        (
            {"land": ["TB-1:N", "R-1:NR"]},
            "step 1 (/steps/0/land): the link between TB-1:N and R-1:NR is not lifted (no "
            "earlier step lifts it)",
        ),
        (
            {"remove_device": "R-9"},
            "step 1 (/steps/0/remove_device): unknown device 'R-9' (did you mean 'R-1'?)",
        ),
        (
            {"deenergize": "CB-9"},
            "step 1 (/steps/0/deenergize): unknown equipment 'CB-9' (did you mean 'CB-1'?)",
        ),
        ({"open": "TS-1/A"}, "step 1 (/steps/0): names no operation; a step needs one of set"),
    ],
)
def test_a_step_naming_something_unknown_is_an_error(panel, op, message):
    with pytest.raises(ProcedureError) as caught:
        check_operations(panel, [op])
    assert str(caught.value).startswith(message)


def test_a_jumper_id_used_twice_is_an_error(panel):
    ops = [
        {"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J1"},
        {"add_jumper": ["TB-1:B", "TB-1:N"], "id": "J1"},
    ]
    with pytest.raises(ProcedureError) as caught:
        check_operations(panel, ops)
    assert str(caught.value) == (
        "step 2 (/steps/1/id): jumper 'J1' is already in place (added at /steps/0); give this "
        "jumper an id of its own"
    )
