"""Tapped windings as coupled sections: what a jumper across part of a live CT's winding does to
the currents the devices see, and what the checks then say.

The model and its algebra are in ``analysis/engine/windings.py``; ngspice and the hand-worked
ampere-turn balances are in ``tests/reference/test_windings_reference.py``. The panel here is the
wye set of builders.py with 600:5 multi-ratio CTs (positions X1 0, X2 100, X3 150, X4 400,
X5 600; S4 of reference.md) used at X1-X4 (400:5, 80 turns): 320 A load gives 4.00 A per phase
(design.md, state currents). Winding 0.30 Ω for the full 120 turns (2.5 mΩ per turn); per phase
lead 0.5 Ω + relay input 0.1 Ω, residual input 0.2 Ω + neutral lead 0.5 Ω.
"""

from __future__ import annotations

import pytest

from analysis.engine import build_netlist, check_operations, ct_burdens
from analysis.engine.state import apply_op, evaluate_states, normal_state
from tests.analysis.engine.builders import wye_panel

POSITIONS = {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600}


def tapped_panel(**kw):
    """The wye panel with its CTs as 600:5 multi-ratio CTs used at X1-X4 (the star on X4)."""
    b = wye_panel(trip=True, z_residual_ohm=0.2, **kw)
    for c in b.doc["cts"]:
        c["terminals"] = dict(POSITIONS)
        c["in_use"] = ["X1", "X4"]
    b.doc["links"] = [
        [x.replace(":X2", ":X4") if x.startswith("CB-1-") else x for x in pair]
        for pair in b.doc["links"]
    ]
    return b


def _state(nl, jumpers):
    st = normal_state(nl)
    for k, (a, b) in enumerate(jumpers):
        _, st = apply_op(nl, st, {"add_jumper": [a, b], "id": f"J{k}"}, k + 1)
    return evaluate_states(nl, [st])[0]


def test_unused_section_shorted_on_one_phase_makes_a_false_residual_and_trips_rule_c():
    """Phase A's X4-X5 (40 unused turns) jumpered at the CT.

    Seen from its tap, the winding is then a Norton source (the algebra of windings.py with the
    section's voltage forced to 0): I = I_p / N = 320 / 120 = 2.667 A in parallel with
    ρ·N_tap·N / N_short = 0.0025 · 80 · 120 / 40 = 0.6 Ω (it gives the 1.231 A of the single
    loop of test_windings_reference: 2.667 · 0.6 / 1.3). Phases B and C stay 4 A sources.
    With the star at 0 V and V_N at the relay star: I_N = I_A + I_B + I_C = I_A − 4
    (I_B + I_C = −4∠0), V_N = 0.7 · (I_A − 4), V_XA = 0.6 · I_A + V_N, and at X1 of phase A
    2.667 = I_A + V_XA / 0.6 → I_A (1 + 1.3 / 0.6) = 2.667 + 2.8 / 0.6 → I_A = 2.316 A, so the
    residual input carries |I_A − 4| = 1.684 A where it carried 0 A: 42 % of the 4 A phase
    current appears on a ground element with its trip connected (rule (c) of the findings
    table; common practice, no source). The single-source model saw nothing change at all.
    """
    nl = build_netlist(tapped_panel().build())
    ev = _state(nl, [("CB-1-A:X4", "CB-1-A:X5")])
    cur = dict(zip(nl.input_keys, ev.inp_cur, strict=True))
    assert abs(cur[("R-1", "IA")]) == pytest.approx(7.3333333 / 3.1666667, rel=1e-6)
    assert abs(cur[("R-1", "IN")]) == pytest.approx(4 - 7.3333333 / 3.1666667, rel=1e-6)
    assert abs(cur[("R-1", "IB")]) == pytest.approx(4.0, rel=1e-9)

    v = check_operations(nl, [{"add_jumper": ["CB-1-A:X4", "CB-1-A:X5"], "id": "J1"}])
    found = {(f.code, f.ct or f.device, f.input) for f in v.steps[1].findings}
    assert ("partial_winding_short", "CB-1-A", None) in found
    assert ("trip_not_isolated", "R-1", "IN") in found
    trip = next(f for f in v.steps[1].findings if f.code == "trip_not_isolated")
    assert trip.numbers["to_a"] == pytest.approx(1.6842, abs=1e-4)
    assert not v.safe


def test_the_device_worked_on_sees_its_phase_current_drop_rule_a():
    """Same jumper, R-1 the device worked on: IA goes from 4.00 A to 2.32 A (42 %), more than the
    10 % of rule (a)."""
    nl = build_netlist(tapped_panel().build())
    v = check_operations(nl, [{"add_jumper": ["CB-1-A:X4", "CB-1-A:X5"], "id": "J1"}], ["R-1"])
    trips = [f for f in v.steps[1].findings if f.code == "trip_not_isolated"]
    assert [(f.device, f.input) for f in trips] == [("R-1", "IA")]
    assert "from 4.00 A to 2.32 A (42 % change" in trips[0].message


def test_partial_short_message_carries_the_section_and_tap_currents():
    """X2-X3 (10 turns, inside the tap) of phase B jumpered: the message names the section, its
    turns, where it is, its current and what the tap delivers now against its 4.00 A."""
    nl = build_netlist(tapped_panel().build())
    v = check_operations(nl, [{"add_jumper": ["CB-1-B:X2", "CB-1-B:X3"], "id": "J1"}])
    (f,) = [f for f in v.steps[1].findings if f.code == "partial_winding_short"]
    ev = _state(nl, [("CB-1-B:X2", "CB-1-B:X3")])
    sec = {(a, b): abs(i) for a, b, _, i in ev.sections("CB-1-B")}
    delivered = abs(ev.delivered("CB-1-B"))
    assert f.ct == "CB-1-B" and f.severity == "warning"
    assert "X2-X3 (100-150 A, 10 turns, inside the tap in use) carries" in f.message
    assert f.numbers["sections"] == [["X2", "X3"]]
    assert f.numbers["section_a"] == [round(sec[("X2", "X3")], 4)]
    assert f.numbers["delivered_a"] == round(delivered, 4)
    assert f.numbers["load_a"] == 4.0
    # the shorted turns carry more than the tap, and the tap delivers less than its 4 A
    assert sec[("X2", "X3")] > sec[("X1", "X2")] == pytest.approx(delivered)
    assert 0 < delivered < 4.0
    # ampere-turns of one core: 20·i + 10·j + 50·i (+ 40·0 outside the tap) = 320 A-turns
    turns = {("X1", "X2"): 20, ("X2", "X3"): 10, ("X3", "X4"): 50, ("X4", "X5"): 40}
    total = sum(turns[(a, b)] * i for a, b, _, i in ev.sections("CB-1-B"))
    assert abs(total) == pytest.approx(320, rel=1e-9)


def test_no_section_shorted_leaves_every_current_as_the_single_source_model():
    """Nothing across the winding but the tap: 4.00 A in every phase input, 0 A residual, the
    unused section X4-X5 carries nothing, and the normal burdens are the usual wye figures
    (reference.md worked case 6: ground fault 2·0.5 + 0.1 + 0.2 = 1.3 Ω with the residual input;
    phase fault 0.5 + 0.1 = 0.6 Ω)."""
    nl = build_netlist(tapped_panel().build())
    ev = _state(nl, [])
    cur = dict(zip(nl.input_keys, ev.inp_cur, strict=True))
    assert [abs(cur[("R-1", f"I{p}")]) for p in "ABC"] == pytest.approx([4.0] * 3, rel=1e-12)
    assert abs(cur[("R-1", "IN")]) < 1e-9
    assert [(a, b, abs(i)) for a, b, _, i in ev.sections("CB-1-A")] == [
        ("X1", "X2", pytest.approx(4.0)),
        ("X2", "X3", pytest.approx(4.0)),
        ("X3", "X4", pytest.approx(4.0)),
        ("X4", "X5", 0.0),
    ]
    assert ev.partial == {}
    b = ct_burdens(nl)["CB-1-A"]
    assert b.ground_fault == pytest.approx(1.3) and b.phase_fault == pytest.approx(0.6)


def test_a_dead_ct_or_a_jumper_across_the_tap_itself_is_no_partial_short():
    nl = build_netlist(tapped_panel().build())
    dead = check_operations(
        nl, [{"deenergize": "CB-1"}, {"add_jumper": ["CB-1-A:X4", "CB-1-A:X5"], "id": "J1"}]
    )
    assert [f.code for f in dead.steps[2].findings] == []
    # a jumper across X1-X4 shorts the tap in use (a bypass of the relay, not a partial short)
    v = check_operations(nl, [{"add_jumper": ["CB-1-A:X1", "CB-1-A:X4"], "id": "J1"}])
    assert "partial_winding_short" not in [f.code for f in v.steps[1].findings]


def test_a_jumper_from_a_mid_tap_terminal_names_only_the_sections_it_bypasses():
    """X1-X2 jumpered with X1-X4 in use: X2 is then joined to the tap's own loop, which joins
    every terminal of the tap through the burden; only X1-X2 carries other than the tap current
    (the jumper shorts 20 turns), so only X1-X2 is named."""
    nl = build_netlist(tapped_panel().build())
    ev = _state(nl, [("CB-1-C:X1", "CB-1-C:X2")])
    assert ev.partial == {"CB-1-C": [("X1", "X2", True)]}


def test_the_whole_winding_shorted_end_to_end_is_no_partial_short():
    """X1-X5 of phase A jumpered with X1-X4 in use: the full winding (120 turns) is shorted, so
    no section is partly shorted (shorting the full winding of a multi-ratio CT is a usual way
    to short it; common practice, no source).

    Seen from its tap the CT is then no source at all but a small impedance: in the stamp of
    windings.py the source and the −0.30 Ω resistor sit between X1 and X5, now one node, and
    what is left is X1-X4 (0.20 Ω) in parallel with X4-X5 (0.10 Ω): 0.0667 Ω. Phases B and C
    still drive 4∠−120° + 4∠120° = 4∠180° A back from the relay star, split between the IA
    path (relay 0.1 + lead 0.5 + 0.0667 Ω) and the IN path (0.2 + 0.5 Ω):
    |IA| = 4 · 0.7 / 1.3667 = 2.049 A, |IN| = 4 · 0.6667 / 1.3667 = 1.951 A.
    """
    nl = build_netlist(tapped_panel().build())
    ev = _state(nl, [("CB-1-A:X1", "CB-1-A:X5")])
    cur = dict(zip(nl.input_keys, ev.inp_cur, strict=True))
    z_a = 0.6 + 0.2 * 0.1 / 0.3
    assert abs(cur[("R-1", "IA")]) == pytest.approx(4 * 0.7 / (z_a + 0.7), rel=1e-9)
    assert abs(cur[("R-1", "IN")]) == pytest.approx(4 * z_a / (z_a + 0.7), rel=1e-9)
    assert ev.partial == {}
    # the primary's 320 A-turns are balanced by the winding: Σ N_k j_k = 320
    total = sum(t * i for *_, t, i in ev.sections("CB-1-A"))
    assert abs(total) == pytest.approx(320, rel=1e-9)
    v = check_operations(nl, [{"add_jumper": ["CB-1-A:X1", "CB-1-A:X5"], "id": "J"}])
    codes = [(f.code, f.device, f.input) for f in v.steps[1].findings]
    assert "partial_winding_short" not in [c[0] for c in codes]
    # the residual that appears (0 → 1.95 A) with R-1's trip connected is still rule (c)
    assert ("trip_not_isolated", "R-1", "IN") in codes


def test_a_differential_relay_sees_the_shorted_section_rule_b():
    """Two 600:5 CTs at X1-X4 (400:5) into the restraint inputs of an 87 relay, each in its own
    loop (lead 0.3 Ω out and back, input 0.1 Ω: Z = 0.7 Ω). X4-X5 of CT-1 jumpered: its input
    goes from 4.00 A to 320 / (120 + 40 · 0.7 / (0.0025 · 80)) = 320 / 260 = 1.23 A (the
    hand-worked case of test_windings_reference), a 69 % change on a differential relay with
    its trip connected: rule (b) of the findings table (common practice, no source)."""
    from tests.analysis.engine.builders import SiteBuilder

    b = SiteBuilder("DIF")
    b.equipment("CB", max_load_a=320)
    inputs = []
    for k in (1, 2):
        b.ct(f"CT-{k}", equipment="CB", terminals=POSITIONS, in_use=("X1", "X4"))
        inputs.append((f"IR{k}", f"R87:{k}A", f"R87:{k}B", 0.1))
        b.wire(f"CT-{k}:X1", f"R87:{k}A", 0.3)
        b.wire(f"R87:{k}B", f"CT-{k}:X4", 0.3)
        b.ground(f"R87:{k}B")
    b.device("R87", functions=("87T",), inputs=inputs, outputs=[("TRIP", "R87:T", "CB:TC")])
    b.wire("R87:T", "CB:TC", 1.0)
    v = check_operations(build_netlist(b.build()), [{"add_jumper": ["CT-1:X4", "CT-1:X5"]}])
    trips = [f for f in v.steps[1].findings if f.code == "trip_not_isolated"]
    assert [(f.device, f.input) for f in trips] == [("R87", "IR1")]
    assert "from 4.00 A to 1.23 A (69 % change; R87 is a differential relay)" in trips[0].message


def test_a_winding_without_recorded_resistance_takes_2_5_milliohm_per_turn():
    """No ``winding_ohm``: 2.5 mΩ per turn (windings.py, from memory), i.e. 0.30 Ω for the 120
    turns of a 600:5 CT, the figure the panel records: the same currents either way."""
    with_r = tapped_panel()
    without = tapped_panel()
    for c in without.doc["cts"]:
        del c["winding_ohm"]
    jumper = [("CB-1-A:X4", "CB-1-A:X5")]
    a = _state(build_netlist(with_r.build()), jumper).inp_cur
    b = _state(build_netlist(without.build()), jumper).inp_cur
    assert b == pytest.approx(a, rel=1e-12)


def test_windings_joined_across_only_through_each_other_are_both_coupled():
    """CT-A and CT-B (X1-X4 in use, each with its own relay loop, B's grounded, A's floating):
    A's X5 is wired to B:X2 and A's loop to B:X3, so A's unused X4-X5 and B's X2-X3 are in one
    loop that no external path closes by itself: each winding is joined across only through the
    other. Both EMFs drive current round that loop (with or without a jumper on B), so both are
    solved as coupled sections: each keeps the ampere-turn balance of its own core (320 A-turns)
    and delivers at its first terminal what its relay carries (Kirchhoff)."""
    from tests.analysis.engine.builders import SiteBuilder

    b = SiteBuilder("CAS")
    b.equipment("CB", max_load_a=320)
    for k in "AB":
        b.ct(f"CT-{k}", equipment="CB", terminals=POSITIONS, in_use=("X1", "X4"))
        b.device(f"R{k}", inputs=[("I", f"R{k}:1", f"R{k}:2", 0.1)])
        b.wire(f"CT-{k}:X1", f"R{k}:1", 0.3)
        b.wire(f"R{k}:2", f"CT-{k}:X4", 0.3)
    b.ground("RB:2")
    b.wire("CT-A:X5", "CT-B:X2", 0.2)
    b.wire("RA:2", "CT-B:X3", 0.2)
    nl = build_netlist(b.build())
    for jumpers in ([], [("CT-B:X4", "CT-B:X5")]):
        ev = _state(nl, jumpers)
        cur = dict(zip(nl.input_keys, ev.inp_cur, strict=True))
        for k in "AB":
            sections = ev.sections(f"CT-{k}")
            assert abs(sum(t * i for *_, t, i in sections)) == pytest.approx(320, rel=1e-9)
            assert ev.delivered(f"CT-{k}") == pytest.approx(cur[(f"R{k}", "I")], abs=1e-9)
        # the loop current: A's unused section carries what B's X2-X3 carries beyond its tap's
        a45 = ev.sections("CT-A")[3][3]
        b_sec = {(x, y): i for x, y, _, i in ev.sections("CT-B")}
        assert abs(a45) > 0.1
        assert abs(b_sec[("X2", "X3")] - b_sec[("X1", "X2")]) == pytest.approx(abs(a45))
        assert set(ev.partial) == {"CT-A", "CT-B"}


def test_unused_taps_of_two_phases_wired_together_circulate_current():
    """A wiring error: X5 of phase A wired (0.1 Ω) to X5 of phase B in the tapped wye panel.
    Neither winding is joined across by an external path alone, but the loop A:X4 → A's X4-X5
    (40 turns) → the wire → B's X5-X4 → the star closes through both, and the EMFs of the two
    unused sections (phases 120° apart) drive a current round it. What holds whatever the
    figures: the two unused sections carry the wire's current, opposite in sense; each core keeps
    its ampere-turn balance; both CTs are named. The figures themselves are checked against
    ngspice (tests/reference/test_windings_reference.py). The single-source model saw no
    current in the wire at all."""
    b = tapped_panel()
    b.wire("CB-1-A:X5", "CB-1-B:X5", 0.1)
    nl = build_netlist(b.build())
    ev = _state(nl, [])
    ia = ev.sections("CB-1-A")[3][3]
    ib = ev.sections("CB-1-B")[3][3]
    assert ia == pytest.approx(-ib, abs=1e-9)
    assert abs(ia) > 1.0
    for p in "AB":
        total = sum(t * i for *_, t, i in ev.sections(f"CB-1-{p}"))
        assert abs(total) == pytest.approx(320, rel=1e-9)
    assert set(ev.partial) == {"CB-1-A", "CB-1-B"}


def test_a_partial_short_on_a_ct_whose_equipment_carries_no_load_still_reads():
    """A 0 A maximum load: the section is still named (the jumper is there whatever the load),
    with 0 A figures and no percentage of nothing."""
    nl = build_netlist(tapped_panel(max_load_a=0).build())
    v = check_operations(nl, [{"add_jumper": ["CB-1-A:X4", "CB-1-A:X5"], "id": "J1"}])
    (f,) = [f for f in v.steps[1].findings if f.code == "partial_winding_short"]
    assert "X4-X5 (400-600 A, 40 turns, outside the tap in use) carries 0 A" in f.message
    assert "(no load recorded)" in f.message
