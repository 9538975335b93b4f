"""Expected readings (what a clamp meter reads) and multi-position switches.

Each circuit is built by hand; the expected currents are worked out beside it from the CT
ratios, the loads and Kirchhoff's current law (from memory)."""

from __future__ import annotations

import math

from analysis.engine import build_netlist, check_operations
from analysis.engine.procedure import simulate
from analysis.engine.readings import shorting_currents, state_readings
from analysis.engine.state import evaluate_states, normal_state
from tests.analysis.engine.builders import SiteBuilder, wye_panel


def _after(nl, ops):
    """The solved state after ``ops`` (from the normal state)."""
    st = simulate(nl, ops)[-1][1] if ops else normal_state(nl)
    return evaluate_states(nl, [st])[0]


def _panel_with_unbalanced_c():
    """wye_panel with a test switch whose shorting bar is NOT bonded to the neutral (the link
    TS-1:SB–TB-1:N is dropped), and phase C re-tapped at 200:5. Load 320 A: A and B carry
    320 / (400/5) = 4.00 A, C carries 320 / (200/5) = 8.00 A (design.md, state currents)."""
    b = wye_panel(test_switch=True, z_residual_ohm=0.2)
    b.doc["links"] = [k for k in b.doc["links"] if k != ["TS-1:SB", "TB-1:N"]]
    for c in b.doc["cts"]:
        if c["code"] == "CB-1-C":
            c["terminals"] = {"X1": 0, "X2": 200}
    return build_netlist(b.build())


def test_the_current_of_a_jumper_inside_a_merged_node_is_solved_from_kirchhoff():
    """Poles A and C open (their jaws close onto TS-1:SB), and a temporary jumper bonds
    TS-1:SB to TB-1:N. The jaws and the jumper are zero-impedance: one merged node. KCL at
    TS-1:SB: the jumper carries the sum of the two jaw currents, |IA + IC| with IA = 4∠0° and
    IC = 8∠120°: √(4² + 8² + 2·4·8·cos 120°) = √48 = 6.93 A. Each jaw carries its own CT's
    current (4.00 A and 8.00 A). The relay's IB input still carries 4.00 A, and it returns
    through IN, the only way back from the relay star: 4.00 A."""
    nl = _panel_with_unbalanced_c()
    ops = [
        {"add_jumper": ["TS-1:SB", "TB-1:N"], "id": "J1"},
        {"set": "TS-1/A", "to": "open"},
        {"set": "TS-1/C", "to": "open"},
    ]
    ev = _after(nl, ops)
    got = {ends: (round(a, 4), par) for _, ends, a, par in shorting_currents(nl, ev)}
    assert got == {
        ("TB-1:A", "TS-1:SB"): (4.0, False),
        ("TB-1:C", "TS-1:SB"): (8.0, False),
        ("TS-1:SB", "TB-1:N"): (round(math.sqrt(48), 4), False),
    }
    assert state_readings(nl, ev) == [
        {"between": ["R-1:IA1", "R-1:IA2"], "a": 0.0},
        {"between": ["R-1:IB1", "R-1:IB2"], "a": 4.0},
        {"between": ["R-1:IC1", "R-1:IC2"], "a": 0.0},
        {"between": ["R-1:N", "R-1:NR"], "a": 4.0},
        {"between": ["TB-1:A", "TS-1:SB"], "a": 4.0},
        {"between": ["TB-1:C", "TS-1:SB"], "a": 8.0},
        {"between": ["TS-1:SB", "TB-1:N"], "a": 6.93},
    ]


def test_a_balanced_set_shorted_on_all_three_phases_puts_nothing_on_the_bond():
    """All three poles open onto the shorting bar, bonded by a jumper to the neutral: the
    jumper carries IA + IB + IC = 0 for a balanced set (4.00 A each at 0°, −120°, +120°)."""
    b = wye_panel(test_switch=True)
    b.doc["links"] = [k for k in b.doc["links"] if k != ["TS-1:SB", "TB-1:N"]]
    nl = build_netlist(b.build())
    ops = [{"add_jumper": ["TS-1:SB", "TB-1:N"], "id": "J1"}] + [
        {"set": f"TS-1/{p}", "to": "open"} for p in "ABC"
    ]
    got = {ends: round(a, 6) for _, ends, a, _ in shorting_currents(nl, _after(nl, ops))}
    assert got == {
        ("TB-1:A", "TS-1:SB"): 4.0,
        ("TB-1:B", "TS-1:SB"): 4.0,
        ("TB-1:C", "TS-1:SB"): 4.0,
        ("TS-1:SB", "TB-1:N"): 0.0,
    }


def test_parallel_shorting_paths_are_flagged_and_their_total_is_the_ct_current():
    """A jumper TB-1:A–TB-1:N and then pole A's jaw (TB-1:A–TS-1:SB, bonded to TB-1:N by a
    link): two zero-impedance paths in parallel for phase A's 4.00 A. How it splits depends
    on contact resistances nobody records, so both are flagged ``parallel``; with equal
    elements the jumper (one element) takes 2/3 and the jaw + bond (two in series) 1/3, and
    the two add up to the CT current (4.00 A)."""
    nl = build_netlist(wye_panel(test_switch=True).build())
    ops = [{"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J1"}, {"set": "TS-1/A", "to": "open"}]
    got = {ends: (a, par) for _, ends, a, par in shorting_currents(nl, _after(nl, ops))}
    assert set(got) == {("TB-1:A", "TB-1:N"), ("TB-1:A", "TS-1:SB")}
    assert all(par for _, par in got.values())
    assert math.isclose(sum(a for a, _ in got.values()), 4.0, rel_tol=1e-9)
    assert math.isclose(got[("TB-1:A", "TB-1:N")][0], 8 / 3, rel_tol=1e-9)


def test_verdict_steps_carry_the_readings_after_each_step():
    """P: trip, then pole A. Step 0 reads the normal load on each input (4.00 A; the residual
    input IN 0 A); after pole A the jaw carries IA (4.00 A) and IN carries IB + IC (4.00 A)."""
    nl = build_netlist(wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2).build())
    v = check_operations(
        nl, [{"set": "TS-1/T1", "to": "open"}, {"set": "TS-1/A", "to": "open"}], ["R-1"]
    )
    body = v.to_json()
    assert body["steps"][0]["readings"] == [
        {"between": ["R-1:IA1", "R-1:IA2"], "a": 4.0},
        {"between": ["R-1:IB1", "R-1:IB2"], "a": 4.0},
        {"between": ["R-1:IC1", "R-1:IC2"], "a": 4.0},
        {"between": ["R-1:N", "R-1:NR"], "a": 0.0},
    ]
    assert body["steps"][2]["readings"] == [
        {"between": ["R-1:IA1", "R-1:IA2"], "a": 0.0},
        {"between": ["R-1:IB1", "R-1:IB2"], "a": 4.0},
        {"between": ["R-1:IC1", "R-1:IC2"], "a": 4.0},
        {"between": ["R-1:N", "R-1:NR"], "a": 4.0},
        {"between": ["TB-1:A", "TS-1:SB"], "a": 4.0},
    ]


def _rotary(p2_closed: bool, transition: str = "simultaneous"):
    """CT (400:5, 320 A load: 4.00 A) into ammeter M through a rotary switch RS (kind
    ``other``, positions P1, P2, P3 in their order of travel), one contact segment per
    position, all joining TB:1 to the meter. P1 and P3 close the CT onto the ammeter; P2 has
    its segment only when ``p2_closed``."""
    b = SiteBuilder("ROT")
    b.equipment("CB", max_load_a=320)
    b.ct("CT", equipment="CB")
    b.wire("CT:X1", "TB:1", 0.2)
    b.wire("CT:X2", "TB:N", 0.2)
    b.ground("TB:N")
    b.block("TB")
    segments = [("TB:1", "RS:1", (p,)) for p in (("P1", "P2", "P3") if p2_closed else ("P1", "P3"))]
    b.switch(
        "RS",
        segments,
        kind="other",
        positions=("P1", "P2", "P3"),
        normal="P1",
        transition=transition,
    )
    b.device("M", kind="meter", functions=("ammeter",), inputs=[("I", "RS:1", "TB:N", 0.05)])
    return build_netlist(b.build())


def test_a_rotary_switch_passes_its_middle_position_and_an_open_one_is_open_secondary():
    """Set RS from P1 to P3: the switch rests in P2 on its way (a rotary switch cannot jump
    over a position; common practice, no source). With P2 open, the live CT is open there:
    ``open_secondary`` at the transition stage, though P1 and P3 both close the circuit."""
    v = check_operations(_rotary(p2_closed=False), [{"set": "RS", "to": "P3"}])
    (f,) = [f for f in v.steps[1].findings if f.severity == "danger"]
    assert (f.code, f.stage, f.ct) == ("open_secondary", "transition", "CT")
    assert "4.00 A secondary" in f.message
    assert not v.safe


def test_a_rotary_switch_whose_middle_position_keeps_the_circuit_is_safe():
    v = check_operations(_rotary(p2_closed=True), [{"set": "RS", "to": "P3"}])
    assert v.safe and v.steps[1].findings == ()
    # the meter reads the CT's 4.00 A all along (P1 → P2 → P3 all close it), and so does
    # the P3 segment, a contact the work made (open in the normal position P1)
    assert v.steps[1].readings == (
        {"between": ["RS:1", "TB:N"], "a": 4.0},
        {"between": ["TB:1", "RS:1"], "a": 4.0},
    )


def test_a_two_position_switch_moves_straight_to_its_other_position():
    """A pole with two positions has nothing in between: one transition state only."""
    nl = build_netlist(wye_panel(test_switch=True).build())
    from analysis.engine.state import apply_op

    passed, after = apply_op(nl, normal_state(nl), {"set": "TS-1/A", "to": "open"}, 1)
    assert len(passed) == 1 and passed[0].override is not None
    assert after.position("TS-1/A") == "open"


def test_each_hop_of_a_rotary_move_gets_its_own_transition():
    """Break-before-make RS from P1 to P3 through P2 (all close the circuit): P1→P2 and
    P2→P3 each break before they make, so the CT is open twice on the way: three states are
    passed (break, P2, break) and the finding is reported once for the step."""
    nl = _rotary(p2_closed=True, transition="break_before_make")
    from analysis.engine.state import apply_op

    passed, after = apply_op(nl, normal_state(nl), {"set": "RS", "to": "P3"}, 1)
    assert [s.override is not None for s in passed] == [True, False, True]
    assert passed[1].position("RS") == "P2" and after.position("RS") == "P3"
    v = check_operations(nl, [{"set": "RS", "to": "P3"}])
    assert [(f.code, f.stage) for f in v.steps[1].findings if f.severity == "danger"] == [
        ("open_secondary", "transition")
    ]


def _tapped(in_use=("X1", "X2")):
    """A multi-ratio CT, X1 0 / X2 200 / X3 400 (A primary), 320 A load, into relay R through
    leads to TB:1 and TB:N."""
    b = SiteBuilder("TAP")
    b.equipment("CB", max_load_a=320)
    b.block("TB")
    b.ct("CT", equipment="CB", terminals={"X1": 0, "X2": 200, "X3": 400}, in_use=in_use)
    b.wire(f"CT:{in_use[0]}", "TB:1", 0.3)
    b.wire(f"CT:{in_use[1]}", "TB:N", 0.3)
    b.ground("TB:N")
    b.device("R", inputs=[("IA", "TB:1", "TB:N", 0.2)])
    return build_netlist(b.build())


def test_a_jumper_across_the_tap_of_a_multi_ratio_ct_reads_the_tap_current():
    """At X1-X2 (200:5) the CT drives 320 / 40 = 8.00 A; a jumper TB:1–TB:N takes all of it
    (0 Ω against the relay's 0.2 Ω) and the relay reads 0 A."""
    nl = _tapped()
    ev = _after(nl, [{"add_jumper": ["TB:1", "TB:N"], "id": "J1"}])
    assert state_readings(nl, ev) == [
        {"between": ["TB:1", "TB:N"], "a": 0.0},
        {"between": ["TB:1", "TB:N"], "a": 8.0},
    ]


def test_a_jumper_across_an_unused_section_carries_that_sections_current():
    """X1-X2 in use, a jumper across the unused section X2-X3 at the CT: the winding is solved
    as coupled sections (windings.py). X3 is joined to nothing but its section and the jumper,
    so by Kirchhoff at X3 the jumper carries exactly that section's current."""
    nl = _tapped()
    ev = _after(nl, [{"add_jumper": ["CT:X2", "CT:X3"], "id": "J1"}])
    (hit,) = shorting_currents(nl, ev)
    sections = ev._b.row_sections(ev._row)[0]
    wa = ev._b.windings
    k = next(
        n
        for n in range(len(wa.sec_a))
        if {nl.terminals[wa.sec_a[n]], nl.terminals[wa.sec_b[n]]} == {"CT:X2", "CT:X3"}
    )
    assert hit[1] == ("CT:X2", "CT:X3")
    assert abs(hit[2] - abs(sections[k])) <= 1e-9 * max(1.0, abs(sections[k]))
    assert abs(sections[k]) > 0.1  # the shorted section does carry current
