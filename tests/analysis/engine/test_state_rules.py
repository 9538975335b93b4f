"""The state rules a protection engineer checks the engine against (issue 9, items 1–5 and the
open-neutral message of item 10), each on a hand-built circuit with its numbers.

Common ground of the panels: CB-1 at 320 A maximum load through 400:5 CTs, so 4.00 A secondary
per phase at A 0°, B −120°, C +120° (design.md, state currents). The circuit rules themselves
(a residual relay must not see a false residual with its trip connected, restore the CT
circuits before the trips, a neutral CT carries the unbalance) are common practice, no source;
sequence components are Fortescue's (from memory).
"""

from __future__ import annotations

import numpy as np
import pytest

from analysis.engine import build_netlist, check_operations, plan_isolation
from analysis.engine.plan import _stripped
from analysis.engine.quantities import elements, negative_sequence, zero_sequence
from analysis.engine.state import evaluate_states, input_roles_of, normal_state
from tests.analysis.engine.builders import SiteBuilder, wye_panel

SHORT_A_UPSTREAM = [{"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J1"}]


def _with_bus(b: SiteBuilder) -> SiteBuilder:
    """CB-1 on a 115 kV bus with a 15.2 kA single-line-to-ground fault level (invented)."""
    b.doc["buses"].append(
        {
            "code": "B115",
            "kv": 115,
            "three_phase_fault_ka": 18.5,
            "ground_fault_ka": 15.2,
            "x_over_r": 12,
        }
    )
    for e in b.doc["equipment"]:
        e["bus"] = "B115"
    return b


def _phase_only_panel(functions: tuple[str, ...]):
    """wye_panel with a test switch and R-1's trip, R-1 with phase inputs IA/IB/IC only (its
    star tied to the neutral by links) and the given functions."""
    b = wye_panel(test_switch=True, trip=True)
    b.doc["devices"][0]["functions"] = list(functions)
    return build_netlist(b.build())


def _trips(verdict, step: int):
    return [f for f in verdict.steps[step].findings if f.code == "trip_not_isolated"]


# --- item 1: calculated residual and negative sequence ---------------------------------------


def test_element_lists():
    """Zero-sequence elements are 50/51/67/87 with suffix N or G; negative-sequence are 46 and
    50/51/67 with suffix Q (IEEE C37.2 numbers, suffix usage from memory). Voltage elements
    (59N, 47) and ground distance (21G) compute nothing from the phase currents here."""
    funcs = ["50/51N", "67G", "51NT", "87N", "50", "59N", "21G", "46", "50Q", "51Q", "67Q", "47"]
    assert elements(["50/51N", "50, 51G"]) == ["50", "51N", "50", "51G"]
    assert zero_sequence(funcs) == ["51N", "67G", "51NT", "87N"]
    assert negative_sequence(funcs) == ["46", "50Q", "51Q", "67Q"]


def test_input_roles_phase_and_quiet():
    """With every CT live and balanced the phase inputs carry 4.00 A and the residual input IN
    carries 0 A although the CTs can drive current through it (a quiet input)."""
    nl = build_netlist(wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2).build())
    roles = input_roles_of(nl)
    assert roles.phase.tolist() == [True, True, True, False]
    assert roles.quiet.tolist() == [False, False, False, True]
    assert roles.computed == {}  # R-1 measures its residual on IN


def test_calculated_residual_appears_when_one_phase_is_shorted_upstream():
    """R-1 (50/51/50N/51N) has phase inputs only, so it computes 3I0 = IA + IB + IC. Phase A
    shorted to the neutral at TB-1: CT A's current stays in the jumper (IA's two ends are one
    node, the relay star being tied to TB-1:N by links), IB and IC carry their 4.00 A, so
    3I0 = |I_B + I_C| = |−I_A| = 4.00 A where the balanced normal state gives 0 A."""
    nl = _phase_only_panel(("50", "51", "50N", "51N"))
    v = check_operations(nl, SHORT_A_UPSTREAM)
    (f,) = _trips(v, 1)
    assert (f.code, f.severity, f.stage, f.device, f.input, f.circuit) == (
        "trip_not_isolated",
        "danger",
        "after",
        "R-1",
        "3I0",
        "CKT-CB-1-A",
    )
    assert f.numbers["to_a"] == pytest.approx(4.0, abs=1e-6)
    assert f.numbers["from_a"] == pytest.approx(0.0, abs=1e-9)
    assert f.numbers["normal_a"] == pytest.approx(0.0, abs=1e-9)
    assert f.numbers["inputs"] == ["IA", "IB", "IC"]
    assert f.numbers["functions"] == ["50N", "51N"]
    assert "calculated residual 3I0 = IA + IB + IC goes from 0 A to 4.00 A" in f.message
    assert v.first_danger == {
        "step": 1,
        "stage": "after",
        "code": "trip_not_isolated",
        "ct": None,
        "device": "R-1",
        "input": "3I0",
    }
    # with R-1's trip opened first the same short is no danger
    ok = check_operations(nl, [{"set": "TS-1/T1", "to": "open"}, *SHORT_A_UPSTREAM])
    assert ok.safe


def test_phase_relay_without_ground_elements_computes_nothing():
    """A 50/51 relay on the same short: IA falls to 0 A, IB and IC are unchanged; no element
    operates on a falling current or on a residual it does not compute."""
    v = check_operations(_phase_only_panel(("50", "51")), SHORT_A_UPSTREAM)
    assert _trips(v, 1) == []
    assert v.safe


def test_negative_sequence_element_computes_i2():
    """A 46 element on the same short: I2 = (I_A + a²·I_B + a·I_C) / 3 with I_A = 0,
    I_B = 4∠−120°, I_C = 4∠120°: a²·I_B = 4∠120°, a·I_C = 4∠240°, their sum 4∠180°, so
    I2 = 4/3 = 1.33 A against 0 A in the balanced normal state (33 % of 4.00 A > 10 %)."""
    v = check_operations(_phase_only_panel(("50", "51", "46")), SHORT_A_UPSTREAM)
    (f,) = _trips(v, 1)
    assert (f.device, f.input) == ("R-1", "I2")
    assert f.numbers["to_a"] == pytest.approx(4.0 / 3.0, abs=1e-4)
    assert f.numbers["functions"] == ["46"]
    assert "negative-sequence current I2" in f.message


def test_relay_with_a_residual_input_is_judged_on_that_input():
    """With a residual input IN (0.2 Ω) R-1 measures 3I0: B + C (4.00 A) return through IN and
    through IA (0.1 Ω, now on the neutral) in inverse ratio, 1/3 through IN (1.33 A); the
    finding names IN, not a calculated quantity."""
    nl = build_netlist(wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2).build())
    (f,) = _trips(check_operations(nl, SHORT_A_UPSTREAM), 1)
    assert (f.device, f.input) == ("R-1", "IN")
    assert f.numbers["to_a"] == pytest.approx(4.0 / 3.0, abs=1e-4)


def neighbour_site(*, trip_switch: bool, functions: tuple[str, ...]):
    """Meter M-1 and relay R-G in series on the wye set of CB-1 (320 A, 400:5): TB-1 → TS-1
    CT poles (shorting jaws to the neutral) → M-1 → R-G → R-G's star → TB-1:N. R-G has phase
    inputs only and trips CB-1, through trip pole TS-1/T2 when ``trip_switch``."""
    b = SiteBuilder("NBR")
    b.equipment("CB-1", max_load_a=320)
    b.block("TB-1")
    for p in "ABC":
        b.ct(f"CB-1-{p}", equipment="CB-1", phase=p, set_name="CB-1-R")
        b.link(f"CB-1-{p}:X2", "CB-1:STAR")
        b.wire(f"CB-1-{p}:X1", f"TB-1:{p}", 0.5)
        b.ct_pole(f"TS-1/{p}", f"TB-1:{p}", f"TS-1:{p}R", "TS-1:SB")
        b.link(f"TS-1:{p}R", f"M-1:I{p}1")
        b.link(f"M-1:I{p}2", f"R-G:I{p}1")
        b.link(f"R-G:I{p}2", "R-G:N")
    b.wire("CB-1:STAR", "TB-1:N", 0.5)
    b.ground("TB-1:N")
    b.link("TS-1:SB", "TB-1:N")
    b.link("R-G:N", "TB-1:N")
    b.device(
        "M-1",
        kind="meter",
        functions=("ammeter",),
        inputs=[(f"I{p}", f"M-1:I{p}1", f"M-1:I{p}2", 0.05) for p in "ABC"],
    )
    b.device(
        "R-G",
        functions=functions,
        inputs=[(f"I{p}", f"R-G:I{p}1", f"R-G:I{p}2", 0.1) for p in "ABC"],
        outputs=[("TRIP", "R-G:T", "CB-1:TC")],
    )
    if trip_switch:
        b.trip_pole("TS-1/T2", "R-G:T", "TS-1:T2R")
        b.wire("TS-1:T2R", "CB-1:TC", 1.0)
    else:
        b.wire("R-G:T", "CB-1:TC", 1.0)
    return build_netlist(b.build())


def test_plan_for_a_neighbour_opens_the_calculated_residual_relays_trip_first():
    """Isolating meter M-1 shorts R-G's phases one pole at a time: with one phase shorted R-G
    computes 3I0 = 4.00 A, so its trip must be open before the first CT pole moves and
    closed only after the last one is back (common practice, no source)."""
    nl = neighbour_site(trip_switch=True, functions=("50", "51", "50N", "51N"))
    plan = plan_isolation(nl, "M-1")
    assert plan.possible
    # the operations without the plan's why and readings
    ops = _stripped([*plan.isolate, *plan.restore])
    ct_steps = [n for n, op in enumerate(ops) if op.get("set", "").removeprefix("TS-1/") in "ABC"]
    trip_open = ops.index({"set": "TS-1/T2", "to": "open"})
    trip_closed = ops.index({"set": "TS-1/T2", "to": "closed"})
    assert trip_open < min(ct_steps) and trip_closed > max(ct_steps)
    assert plan.verdict is not None and plan.verdict.safe
    # the same poles with R-G's trip left in: the first pole is the danger
    bad = check_operations(nl, [{"set": "TS-1/A", "to": "open"}], ["M-1"])
    assert [(f.stage, f.device, f.input) for f in _trips(bad, 1)] == [
        ("transition", "R-G", "3I0"),
        ("after", "R-G", "3I0"),
    ]


def test_plan_for_a_neighbour_is_impossible_when_the_residual_relays_trip_cannot_open():
    nl = neighbour_site(trip_switch=False, functions=("50", "51", "50N", "51N"))
    plan = plan_isolation(nl, "M-1")
    assert not plan.possible


# --- item 3: currents judged against the normal state ----------------------------------------

SHORT_AND_RESTORE = [
    *({"set": f"TS-1/{p}", "to": "open"} for p in "ABC"),
    *({"set": f"TS-1/{p}", "to": "closed"} for p in "ABC"),
]


def test_a_relays_load_current_coming_back_is_no_false_quantity():
    """R-G (50/51, no trip switch) is shorted and restored with M-1: closing TS-1/A brings IA
    from 0 A back to its normal 4.00 A. A current returning to its normal value is no false
    operating quantity (design.md rule (c)), so the sequence is safe with R-G's trip in, and
    a plan for M-1 need not (and here could not) open it."""
    nl = neighbour_site(trip_switch=False, functions=("50", "51"))
    v = check_operations(nl, SHORT_AND_RESTORE, ["M-1"])
    assert [f.code for _, f in v.findings if f.code == "trip_not_isolated"] == []
    assert v.safe
    plan = plan_isolation(nl, "M-1")
    assert plan.possible and plan.verdict is not None and plan.verdict.safe


def test_a_current_rising_above_its_normal_value_is_a_false_quantity():
    """Two single CTs (CB-1 and CB-2, 320 A, 400:5: 4.00 A each). Jumpers tie TB-2's neutral
    and line to TB-1's: R-1's input (0.1 Ω) and M-2's (0.1 Ω) are then in parallel across the
    two CTs and share 8.00 A equally (4.00 A each, no change). Removing M-2 leaves R-1 alone
    with both CTs' 8.00 A against its normal 4.00 A: its 50/51 sees twice its current with
    the trip in. Putting M-2 back and removing the jumper bring R-1 back to 4.00 A: no
    finding (a return to normal)."""
    b = SiteBuilder("PAR")
    for n in (1, 2):
        b.equipment(f"CB-{n}", max_load_a=320)
        b.block(f"TB-{n}")
        b.ct(f"CT-{n}", equipment=f"CB-{n}")
        b.wire(f"CT-{n}:X1", f"TB-{n}:1", 0.5)
        b.wire(f"CT-{n}:X2", f"TB-{n}:N", 0.5)
        b.ground(f"TB-{n}:N")
    b.device(
        "R-1",
        functions=("50", "51"),
        inputs=[("IA", "TB-1:1", "TB-1:N", 0.1)],
        outputs=[("TRIP", "R-1:T", "CB-1:TC")],
    )
    b.wire("R-1:T", "CB-1:TC", 1.0)
    b.device("M-2", kind="meter", functions=("ammeter",), inputs=[("IA", "TB-2:1", "TB-2:N", 0.1)])
    ops = [
        {"add_jumper": ["TB-1:N", "TB-2:N"], "id": "J1"},
        {"add_jumper": ["TB-1:1", "TB-2:1"], "id": "J2"},
        {"remove_device": "M-2"},
        {"insert_device": "M-2"},
        {"remove_jumper": "J2"},
    ]
    v = check_operations(build_netlist(b.build()), ops, ["M-2"])
    assert [(n, f.device, f.input) for n, f in v.findings if f.code == "trip_not_isolated"] == [
        (3, "R-1", "IA")
    ]
    (f,) = _trips(v, 3)
    assert f.numbers["from_a"] == pytest.approx(4.0, abs=1e-6)
    assert f.numbers["to_a"] == pytest.approx(8.0, abs=1e-6)
    assert f.numbers["normal_a"] == pytest.approx(4.0, abs=1e-6)
    assert "rise above its normal value" in f.message


# --- item 4: collateral that sees no load ------------------------------------------------------


def test_residual_input_is_bypassed_when_no_ct_reaches_it_and_not_when_dead():
    """R-1's residual input IN carries 0 A in normal service. With A and B shorted at TS-1 it
    still carries phase C's current; with C shorted too no CT reaches it: bypassed, with the
    ground elements it serves. De-energizing CB-1 instead is no bypass of anything."""
    nl = build_netlist(wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2).build())
    ops = [{"set": "TS-1/T1", "to": "open"}, *({"set": f"TS-1/{p}", "to": "open"} for p in "ABC")]
    v = check_operations(nl, ops)
    found = [(n, f.input) for n, f in v.findings if f.code == "input_bypassed"]
    assert found == [(2, "IA"), (3, "IB"), (4, "IC"), (4, "IN")]
    (f,) = [f for f in v.steps[4].findings if f.input == "IN"]
    assert f.numbers["functions"] == ["50N", "51N"]
    assert "about 0 A in normal service" in f.message and "50N/51N" in f.message
    dead = check_operations(nl, [{"set": "TS-1/T1", "to": "open"}, {"deenergize": "CB-1"}])
    assert [f.code for _, f in dead.findings] == []


def differential_site():
    """A single-phase differential: CT-1 (CB-1) and CT-2 (CB-2) both 400:5 at 320 A through
    load, CT-2 connected in reverse, so that in the operate input (TB:P–TB:N, 0.1 Ω) the two
    secondaries cancel: 0 A in normal service, the fault current for an internal fault."""
    b = SiteBuilder("DIF")
    b.block("TB")
    for n in (1, 2):
        b.equipment(f"CB-{n}", max_load_a=320)
        b.ct(f"CT-{n}", equipment=f"CB-{n}")
    b.wire("CT-1:X1", "TB:P", 0.5)
    b.wire("CT-1:X2", "TB:N", 0.5)
    b.wire("CT-2:X2", "TB:P", 0.5)
    b.wire("CT-2:X1", "TB:N", 0.5)
    b.ground("TB:N")
    b.device(
        "R-87",
        functions=("87B",),
        inputs=[("OP", "TB:P", "R-87:2", 0.1)],
        outputs=[("TRIP", "R-87:T", "86B:1")],
    )
    b.link("R-87:2", "TB:N")
    b.switch("TS-87", [("R-87:T", "86B:1", ("closed",))], transition="break_before_make")
    return build_netlist(b.build())


def test_differential_operate_input_is_bypassed_by_a_jumper():
    """A jumper across the operate input leaves it 0 A as before (no rule (b) change), but
    no CT current can reach it any more: the 87B is lost, a caution."""
    nl = differential_site()
    (ev,) = evaluate_states(nl, [normal_state(nl)])
    assert abs(ev.inp_cur[0]) == pytest.approx(0.0, abs=1e-9)
    ops = [{"set": "TS-87", "to": "open"}, {"add_jumper": ["TB:P", "TB:N"], "id": "J1"}]
    v = check_operations(nl, ops)
    (f,) = v.steps[2].findings
    assert (f.code, f.severity, f.device, f.input) == ("input_bypassed", "caution", "R-87", "OP")
    assert f.numbers["functions"] == ["87B"]


def neutral_ct_site():
    """A neutral CT CB-1-N (400:5) on CB-1 (320 A) into a 51G relay through test-switch pole
    TS-N/1 (shorting jaw to the return); CB-1 on bus B115 (15.2 kA ground fault)."""
    b = SiteBuilder("NEU")
    b.equipment("CB-1", max_load_a=320)
    _with_bus(b)
    b.block("TB-N")
    b.ct("CB-1-N", equipment="CB-1", phase="N")
    b.wire("CB-1-N:X1", "TB-N:1", 0.5)
    b.wire("CB-1-N:X2", "TB-N:2", 0.5)
    b.ground("TB-N:2")
    b.ct_pole("TS-N/1", "TB-N:1", "TS-N:1R", "TB-N:2")
    b.device(
        "R-51G",
        functions=("51G",),
        inputs=[("IG", "TS-N:1R", "TB-N:2", 0.2)],
        outputs=[("TRIP", "R-51G:T", "CB-1:TC")],
    )
    b.trip_pole("TS-N/T", "R-51G:T", "CB-1:TC")
    return build_netlist(b.build())


def test_neutral_ct_injects_no_load_current():
    """A neutral CT carries the unbalance, about 0 A with a balanced load, not the 320 A of
    the phases: its normal injection is 0 A (not 4.00 A), and so is its relay's input."""
    nl = neutral_ct_site()
    assert nl.cts["CB-1-N"].load_secondary_a == 0.0
    assert np.abs(nl.arrays.ct_load).tolist() == [0.0]
    (ev,) = evaluate_states(nl, [normal_state(nl)])
    assert abs(ev.inp_cur[0]) == pytest.approx(0.0, abs=1e-12)


def test_neutral_ct_input_is_bypassed_and_an_open_neutral_ct_says_what_flows():
    """Shorting the neutral CT at its pole leaves the 51G input without any CT current
    (bypassed although it carried 0 A). Lifting its lead opens a live CT that carries about
    0 A in normal service but the ground-fault current in a fault: 15.2 kA × 5/400 = 190 A
    secondary."""
    nl = neutral_ct_site()
    v = check_operations(nl, [{"set": "TS-N/T", "to": "open"}, {"set": "TS-N/1", "to": "open"}])
    (f,) = v.steps[2].findings
    assert (f.code, f.device, f.input, f.numbers["functions"]) == (
        "input_bypassed",
        "R-51G",
        "IG",
        ["51G"],
    )
    v = check_operations(nl, [{"lift": ["CB-1-N:X1", "TB-N:1"]}])
    (f,) = v.steps[1].findings
    assert (f.code, f.ct) == ("open_secondary", "CB-1-N")
    assert "about 0 A in normal service" in f.message
    assert "190.00 A secondary for B115's 15.2 kA ground fault at 400:5" in f.message
    assert f.numbers["secondary_a"] == 0.0
    assert f.numbers["ground_fault_secondary_a"] == pytest.approx(190.0)


# --- item 10: the open-neutral message ---------------------------------------------------------


def test_open_neutral_of_a_wye_set_states_what_really_flows():
    """Lifting the neutral lead of the wye set: the three phase CTs still form a loop through
    the relay's phase inputs, so the balanced load (4.00 A each, summing to 0) circulates;
    what has no path is the zero-sequence current of a ground fault, 3I0 = I_f for a single
    line to ground fault: 15.2 kA × 5/400 = 190 A secondary on the faulted phase."""
    nl = build_netlist(_with_bus(wye_panel(test_switch=True)).build())
    v = check_operations(nl, [{"lift": ["CB-1:STAR", "TB-1:N"]}])
    opens = [f for f in v.steps[1].findings if f.code == "open_secondary"]
    assert [f.ct for f in opens] == ["CB-1-A", "CB-1-B", "CB-1-C"]
    f = opens[0]
    assert f.numbers["open_return"] == "CB-1-R"
    assert f.numbers["ground_fault_secondary_a"] == pytest.approx(190.0)
    assert "balanced load still circulates through the phases (4.00 A secondary in each" in (
        f.message
    )
    assert "zero-sequence current 3I0 of a ground fault has no path" in f.message
    assert "190.00 A secondary for B115's 15.2 kA ground fault" in f.message
    # one phase lead lifted is a plain open secondary with its load current
    (one,) = check_operations(nl, [{"lift": ["CB-1-A:X1", "TB-1:A"]}]).steps[1].findings
    assert "open_return" not in one.numbers
    assert "driving 4.00 A secondary (320 A primary load) into an open circuit" in one.message
