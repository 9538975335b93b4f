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
    return [(f.code, f.phase, f.ct or f.device, f.input) for f in verdict.steps[step].findings]


@pytest.fixture
def panel():
    return build_netlist(wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2).build())


# --- open_secondary -------------------------------------------------------------------------


def test_lifting_a_live_lead_opens_the_secondary_with_its_current(panel):
    v = check_operations(panel, [{"lift": ["CB-1-A:X1", "TB-1:A"]}, {"note": "wait"}])
    first = v.steps[1].findings[0]
    assert (first.code, first.phase, first.ct) == ("open_secondary", "after", "CB-1-A")
    assert "4.00 A secondary" in first.message and "320 A" in first.message
    # reported in every state where it holds
    assert ("open_secondary", "after", "CB-1-A", None) in _codes(v, 2)
    assert v.first_danger == {"step": 1, "phase": "after", "code": "open_secondary", "ct": "CB-1-A"}
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
    assert [(f.code, f.ct) for f in v.steps[3].findings] == [("open_secondary", "CB-1-A")]
    assert [f.code for f in v.steps[4].findings if f.code == "open_secondary"] == []


def test_an_open_ct_in_the_normal_state_is_listed_at_step_0():
    b = wye_panel()
    b.doc["wires"] = [w for w in b.doc["wires"] if w["from"] != "CB-1-B:X1"]
    v = check_operations(build_netlist(b.build()), [{"note": "look"}], ["R-1"])
    assert [(f.code, f.phase, f.ct) for f in v.steps[0].findings] == [
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
    assert [(f.code, f.phase, f.ct) for f in v.steps[1].findings if f.code == "open_secondary"] == [
        ("open_secondary", "transition", "CB-1-B")
    ]
    assert v.first_danger == {
        "step": 1,
        "phase": "transition",
        "code": "open_secondary",
        "ct": "CB-1-B",
    }


def test_simultaneous_switch_has_no_transition_state():
    nl = build_netlist(wye_panel(test_switch=True, transition="simultaneous").build())
    v = check_operations(nl, [{"set": "TS-1/B", "to": "open"}])
    assert {f.phase for f in v.steps[1].findings} == {"after"}
    assert v.safe


# --- trip_not_isolated ----------------------------------------------------------------------


def test_rule_a_input_change_of_the_device_worked_on_while_its_trip_is_connected(panel):
    v = check_operations(panel, [{"set": "TS-1/A", "to": "open"}], ["R-1"])
    trips = [f for f in v.steps[1].findings if f.code == "trip_not_isolated"]
    assert [(f.phase, f.device, f.input) for f in trips] == [
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
    assert [f.code for f in v.steps[5].findings] == []  # no current change: nothing yet
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
    assert "appear" in trips[0].message
    assert trips[0].numbers["from_a"] == pytest.approx(0.0, abs=1e-9)
    assert trips[0].numbers["to_a"] == pytest.approx(4.0 / 3.0, abs=1e-4)


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
    assert "50/51/50N/51N" in f.message and "4.00 A" in f.message
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
    assert "X4-X5 (400-600 A)" in f.message


def test_a_section_inside_the_tap_or_a_dead_ct_is_not_reported():
    nl = _multi_ratio()
    assert (
        check_operations(nl, [{"add_jumper": ["CT:X2", "CT:X3"], "id": "J1"}]).steps[1].findings
        == ()
    )
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
    assert [(f.code, f.phase) for f in v.steps[0].findings] == [("no_ground", "before")]


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
        ({"set": "TS-9/A", "to": "open"}, "step 1: unknown switch 'TS-9/A'"),
        ({"set": "TS-1/A", "to": "half"}, "switch TS-1/A has no position 'half'"),
        ({"remove_jumper": "J7"}, "step 1: unknown jumper 'J7'"),
        ({"add_jumper": ["TB-1:A", "TB-7:1"], "id": "J1"}, "unknown terminal 'TB-7:1'"),
        ({"lift": ["TB-1:A", "TB-1:B"]}, "no wire between TB-1:A and TB-1:B"),
        ({"remove_device": "R-9"}, "unknown device 'R-9'"),
        ({"deenergize": "CB-9"}, "unknown equipment 'CB-9'"),
        ({"open": "TS-1/A"}, "unknown operation"),
    ],
)
def test_a_step_naming_something_unknown_is_an_error(panel, op, message):
    with pytest.raises(ProcedureError, match=message.replace("(", r"\(").replace(")", r"\)")):
        check_operations(panel, [{"note": "first"}, op][1:])


def test_a_jumper_id_used_twice_is_an_error(panel):
    ops = [
        {"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J1"},
        {"add_jumper": ["TB-1:B", "TB-1:N"], "id": "J1"},
    ]
    with pytest.raises(ProcedureError, match="step 2: jumper 'J1' is already in place"):
        check_operations(panel, ops)
