"""Isolation plans a planner would sign: trips first and last, the device free to remove, a
one-line reason and the expected readings on every step, the shortest CT work, collateral,
impossible cases.

The practice (common practice, no source): open every trip that the work can affect before
any CT circuit is touched; short each CT circuit before opening it; end with the device free
to remove (case withdrawn, or inputs, neutral and outputs opened); restore the CT circuits,
verify the relays read their normal currents, then close the trips. The currents: a 320 A
load on a 400:5 CT is 4.00 A secondary (design.md, state currents); Kirchhoff's current law
(from memory) gives the rest, as worked out beside each check."""

from __future__ import annotations

import pytest

from analysis.engine import ProcedureError, build_netlist, check_operations, plan_isolation
from analysis.engine.cautions import cautions
from analysis.engine.plan import _stripped
from tests.analysis.engine.builders import SiteBuilder, wye_panel
from tests.analysis.engine.test_state_checks import residual_panel


def _ops(steps):
    """The operations of plan steps without their ``why`` and ``readings``."""
    return _stripped(list(steps))


def _r(pairs):
    return [{"between": list(t), "a": a} for t, a in pairs]


PHASE_INPUTS = [(f"R-1:I{p}1", f"R-1:I{p}2") for p in "ABC"]


def test_test_switch_panel_plan_reads_as_a_planner_writes_it():
    """R-1 (phase inputs and a residual input IN in the star return) behind test switch TS-1.
    Trip first. Pole A: its jaw makes before its knife breaks and carries phase A's 4.00 A;
    IB + IC (= −IA, 4.00 A) now return through IN. Pole C takes the last phase: IN back to
    0 A. R-1's star return R-1:NR is linked to TB-1:N with no neutral pole, so the plan says
    that connection stays and must be lifted. Restore in the reverse order, verify the
    normal 4.00 A / 0 A, close the trip."""
    nl = build_netlist(wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2).build())
    plan = plan_isolation(nl, "R-1")
    assert plan.possible
    assert _ops(plan.isolate) == [
        {"set": "TS-1/T1", "to": "open"},
        {"set": "TS-1/A", "to": "open"},
        {"set": "TS-1/B", "to": "open"},
        {"set": "TS-1/C", "to": "open"},
        {
            "note": "R-1 carries no current and operates nothing (its inputs and outputs are "
            "opened at TS-1/T1, TS-1/A, TS-1/B, TS-1/C), but R-1:NR stays joined to the CT "
            "circuit or a trip target (no recorded provision parts it): lift that connection, "
            "with the CT circuit shorted as above, before removing R-1"
        },
    ]
    whys = [op["why"] for op in plan.isolate]
    assert whys[0] == "open R-1's trip TRIP (R-1:T1 → CB-1:TC) before any CT circuit is touched"
    assert whys[1] == (
        "shorts the CT circuit at TB-1:A–TS-1:SB (4.00 A) (make-before-break: made before the "
        "circuit opens); input currents R-1 IA 4.00 A → 0.00 A, R-1 IN 0.00 A → 4.00 A; parts "
        "R-1 from the CT circuit at TS-1/A, so that it is free to remove"
    )
    assert whys[3].startswith("shorts the CT circuit at TB-1:C–TS-1:SB (4.00 A)")
    assert "R-1 IC 4.00 A → 0.00 A, R-1 IN 4.00 A → 0.00 A" in whys[3]
    assert plan.isolate[0]["readings"] == _r(
        [*((t, 4.0) for t in PHASE_INPUTS), (("R-1:N", "R-1:NR"), 0.0)]
    )
    assert plan.isolate[1]["readings"] == _r(
        [
            (PHASE_INPUTS[0], 0.0),
            (PHASE_INPUTS[1], 4.0),
            (PHASE_INPUTS[2], 4.0),
            (("R-1:N", "R-1:NR"), 4.0),
            (("TB-1:A", "TS-1:SB"), 4.0),
        ]
    )
    # all three shorted: each jaw carries its own phase's 4.00 A, nothing reaches the relay
    assert plan.isolate[3]["readings"][-3:] == _r(
        [(("TB-1:A", "TS-1:SB"), 4.0), (("TB-1:B", "TS-1:SB"), 4.0), (("TB-1:C", "TS-1:SB"), 4.0)]
    )
    assert _ops(plan.restore) == [
        {"set": "TS-1/C", "to": "closed"},
        {"set": "TS-1/B", "to": "closed"},
        {"set": "TS-1/A", "to": "closed"},
        {
            "note": "verify with a clamp meter, before any trip is closed, that the relays read "
            "their normal currents: R-1 IA 4.00 A, R-1 IB 4.00 A, R-1 IC 4.00 A, R-1 IN 0.00 A"
        },
        {"set": "TS-1/T1", "to": "closed"},
    ]
    assert plan.restore[3]["readings"] == plan.isolate[0]["readings"]
    assert plan.restore[-1]["why"] == (
        "close R-1's trip TRIP (R-1:T1 → CB-1:TC) last, with its CT circuits back to normal "
        "and its currents verified"
    )
    assert all(op["why"] and "readings" in op for op in (*plan.isolate, *plan.restore))
    assert plan.affected == ()
    assert plan.verdict is not None and plan.verdict.safe


def test_draw_out_case_is_withdrawn_and_the_plan_says_so():
    """The case's make-before-break shorting contacts (line side to the neutral, DC-1:xL–
    DC-1:NL) each take their phase's 4.00 A as the relay's inputs go to 0 A; withdrawn, the
    relay is free to remove."""
    nl = build_netlist(wye_panel(test_switch=True, trip=True, draw_out=True).build())
    plan = plan_isolation(nl, "R-1")
    assert _ops(plan.isolate) == [
        {"set": "TS-1/T1", "to": "open"},
        {"set": "DC-1", "to": "withdrawn"},
        {"note": "R-1 is free to remove: draw-out case DC-1 withdrawn"},
    ]
    assert plan.isolate[1]["readings"] == _r(
        [
            *((t, 0.0) for t in PHASE_INPUTS),
            (("DC-1:AL", "DC-1:NL"), 4.0),
            (("DC-1:BL", "DC-1:NL"), 4.0),
            (("DC-1:CL", "DC-1:NL"), 4.0),
        ]
    )
    assert _ops(plan.restore) == [
        {"set": "DC-1", "to": "inserted"},
        {
            "note": "verify with a clamp meter, before any trip is closed, that the relays read "
            "their normal currents: R-1 IA 4.00 A, R-1 IB 4.00 A, R-1 IC 4.00 A"
        },
        {"set": "TS-1/T1", "to": "closed"},
    ]


def test_break_before_make_poles_need_temporary_jumpers_at_the_terminal_block():
    """A break-before-make pole would open the CT while it moves: a temporary jumper shorts
    each phase at TB-1 first (it takes the 4.00 A), then the pole parts the relay. The jaw
    then closes in parallel with the jumper: both readings are flagged ``parallel`` (their
    split depends on contact resistances) and add up to the CT's 4.00 A."""
    nl = build_netlist(
        wye_panel(test_switch=True, trip=True, transition="break_before_make").build()
    )
    plan = plan_isolation(nl, "R-1")
    assert plan.possible
    assert plan.isolate[0]["set"] == "TS-1/T1"
    jumpers = [op["add_jumper"] for op in plan.isolate if "add_jumper" in op]
    assert sorted(jumpers) == [["TB-1:A", "TB-1:N"], ["TB-1:B", "TB-1:N"], ["TB-1:C", "TB-1:N"]]
    first_jumper = next(op for op in plan.isolate if "add_jumper" in op)
    phase = "ABC"[["TB-1:A", "TB-1:B", "TB-1:C"].index(first_jumper["add_jumper"][0])]
    assert {"between": first_jumper["add_jumper"], "a": 4.0} in first_jumper["readings"]
    # every pole opens after its jumper is in place
    for p in "ABC":
        at_jumper = next(
            k for k, op in enumerate(plan.isolate) if op.get("add_jumper", [""])[0] == f"TB-1:{p}"
        )
        at_pole = next(k for k, op in enumerate(plan.isolate) if op.get("set") == f"TS-1/{p}")
        assert at_jumper < at_pole
    after_pole = next(op for op in plan.isolate if op.get("set") == f"TS-1/{phase}")
    shared = [r for r in after_pole["readings"] if r.get("parallel")]
    assert len(shared) == 2 and abs(sum(r["a"] for r in shared) - 4.0) <= 0.01
    assert "parts R-1 from the CT circuit" in after_pole["why"]
    assert plan.restore[-1] == {**plan.restore[-1], "set": "TS-1/T1", "to": "closed"}
    assert sum("remove_jumper" in op for op in plan.restore) == 3
    assert check_operations(nl, _ops([*plan.isolate, *plan.restore]), ["R-1"]).safe


def test_without_a_trip_isolation_point_it_is_impossible_and_says_where_jumpers_go():
    nl = build_netlist(wye_panel(trip=True).build())
    plan = plan_isolation(nl, "R-1")
    assert not plan.possible
    assert plan.isolate == () and plan.restore == ()
    assert [list(p) for p in plan.jumpers_needed] == [
        ["TB-1:A", "TB-1:N"],
        ["TB-1:B", "TB-1:N"],
        ["TB-1:C", "TB-1:N"],
    ]
    assert "no switch is on the path of output TRIP (R-1:T1 → CB-1:TC)" in (plan.reason or "")
    body = plan.to_json()
    assert body["possible"] is False and body["cautions"] == cautions()


def test_a_ct_already_open_in_the_record_is_reported_first():
    """Phase A's lead CB-1-A:X1–TB-1:A is missing from the record: the live CT is open in
    the normal state. No plan can make that safe: the plan is not possible, the reason names
    the CT first, and the verdict shows the danger at step 0 (design.md, plans)."""
    b = wye_panel(test_switch=True, trip=True)
    b.doc["wires"] = [w for w in b.doc["wires"] if w["from"] != "CB-1-A:X1"]
    plan = plan_isolation(build_netlist(b.build()), "R-1")
    assert not plan.possible and plan.isolate == ()
    assert (plan.reason or "").startswith(
        "CT CB-1-A (X1-X2) is live and already open in the recorded normal state"
    )
    assert plan.verdict is not None
    assert plan.verdict.first_danger == {
        "step": 0,
        "stage": "before",
        "code": "open_secondary",
        "ct": "CB-1-A",
        "device": None,
        "input": None,
    }


def test_collateral_names_the_other_device_and_its_functions():
    """R and meter M in series on one CT (300 A / 80 = 3.75 A): shorting at TS/1 takes both
    off; M is collateral. R's far end R:2 stays joined to the CT through M (no switch parts
    it), which the closing note says."""
    b = SiteBuilder("COL")
    b.equipment("CB", max_load_a=300)
    b.block("TB")
    b.ct("CT", equipment="CB")
    b.wire("CT:X1", "TB:1", 0.3)
    b.wire("CT:X2", "TB:N", 0.3)
    b.ground("TB:N")
    b.ct_pole("TS/1", "TB:1", "TS:1R", "TS:SB")
    b.link("TS:SB", "TB:N")
    b.device(
        "R",
        functions=("50", "51"),
        inputs=[("IA", "TS:1R", "R:2", 0.1)],
        outputs=[("TRIP", "R:T", "CB:TC")],
    )
    b.device("M", kind="meter", functions=("ammeter",), inputs=[("IA", "R:2", "TB:N", 0.05)])
    b.trip_pole("TS/T1", "R:T", "TS:TR")
    b.wire("TS:TR", "CB:TC", 1.0)
    plan = plan_isolation(build_netlist(b.build()), "R")
    assert _ops(plan.isolate)[:2] == [
        {"set": "TS/T1", "to": "open"},
        {"set": "TS/1", "to": "open"},
    ]
    assert "input currents R IA 3.75 A → 0.00 A, M IA 3.75 A → 0.00 A" in plan.isolate[1]["why"]
    assert "but R:2 stays joined" in plan.isolate[2]["note"]
    (hit,) = plan.affected
    assert hit["device"] == "M" and hit["input"] == "IA" and hit["functions"] == ["ammeter"]
    body = plan.to_json("COL")
    assert list(body) == [
        "site",
        "device",
        "possible",
        "isolate",
        "restore",
        "affected",
        "verdict",
        "jumpers_needed",
        "reason",
        "cautions",
    ]
    assert body["verdict"]["safe"] is True and body["site"] == "COL"


def test_unknown_device():
    with pytest.raises(ProcedureError, match="unknown device 'R-9'"):
        plan_isolation(build_netlist(wye_panel().build()), "R-9")


def test_another_relays_trip_is_opened_first_and_says_whose_and_why():
    """Phase relay R-50 in series with residual relay R-50N. Shorting phase A makes IB + IC
    (4.00 A) return through R-50N's IN: a false ground operation, so R-50N's trip is opened
    too, after R-50's own, and the step says whose and why. On the way back the trips only
    once the three CT poles are closed and the currents verified (IN back to 0 A)."""
    nl = build_netlist(residual_panel().build())
    plan = plan_isolation(nl, "R-50")
    assert plan.possible
    assert _ops(plan.isolate)[:5] == [
        {"set": "TS-1/T1", "to": "open"},
        {"set": "TS-1/T2", "to": "open"},
        {"set": "TS-1/A", "to": "open"},
        {"set": "TS-1/B", "to": "open"},
        {"set": "TS-1/C", "to": "open"},
    ]
    assert plan.isolate[1]["why"] == (
        "open R-50N's trip TRIP (R-50N:T → CB-1:TC): the work changes what R-50N measures "
        "(IN 0.00 A normally, 4.00 A during the work) and it would trip falsely"
    )
    assert _ops(plan.restore) == [
        {"set": "TS-1/C", "to": "closed"},
        {"set": "TS-1/B", "to": "closed"},
        {"set": "TS-1/A", "to": "closed"},
        {
            "note": "verify with a clamp meter, before any trip is closed, that the relays read "
            "their normal currents: R-50 IA 4.00 A, R-50 IB 4.00 A, R-50 IC 4.00 A, "
            "R-50N IN 0.00 A"
        },
        {"set": "TS-1/T2", "to": "closed"},
        {"set": "TS-1/T1", "to": "closed"},
    ]
    assert plan.verdict is not None and plan.verdict.safe


def test_demo_feeder_plan_opens_the_neutral_pole_and_restores_it_first():
    """fixtures/demo/quillfen.json, R-132 with R-132N in its neutral (fixtures/demo/README.md):
    both trips, the three CT poles, then the neutral pole /N (no jaw; it carries nothing once
    the phases are shorted upstream) frees R-132 and R-132N from the CTs. Back: /N first (the
    return path before the phases), the poles, verify, the trips."""
    import json
    from pathlib import Path

    doc = json.loads(
        (Path(__file__).resolve().parents[3] / "fixtures" / "demo" / "quillfen.json").read_text()
    )
    plan = plan_isolation(build_netlist(doc), "R-132")
    assert plan.possible and plan.verdict is not None and plan.verdict.safe
    assert [op.get("set") for op in plan.isolate] == [
        "TS-132/T1",
        "TS-132/T2",
        "TS-132/1",
        "TS-132/2",
        "TS-132/3",
        "TS-132/N",
        None,
    ]
    assert plan.isolate[-1]["note"].startswith("R-132 is free to remove")
    assert [op.get("set") for op in plan.restore] == [
        "TS-132/N",
        "TS-132/3",
        "TS-132/2",
        "TS-132/1",
        None,
        "TS-132/T2",
        "TS-132/T1",
    ]
    assert plan.restore[4]["note"].startswith("verify with a clamp meter")


def _ct_ops(steps):
    """The CT-side operations of plan steps (not the trip poles, not the notes)."""
    return [op for op in _ops(steps) if "note" not in op and "/T" not in op.get("set", "")]


def _bfs_lengths(nl, device):
    """Lengths of the CT work (isolation, restoration) found by plain breadth-first search
    over every CT-side switch of the device's region, from the state with every trip that a
    trip-path switch can part open (the exhaustive search the faster one must match)."""
    from analysis.engine.plan import _run, _Search, _trip_sequence
    from analysis.engine.procedure import region_mask, subnet, touched_terminals

    seeds, _ = touched_terminals(nl, [], (device,))
    sub = subnet(nl, region_mask(nl, seeds, []))
    s = _Search(sub, device)
    outs = [o for o in sub.outputs if _trip_sequence(s, [o]) is not None]
    s.origin = _run(sub, s.start, _trip_sequence(s, outs) or [])
    iso = s.search(s.origin, s.isolated_and_free, [], s.ct_switches)
    if iso is None:
        return None, None
    end = _run(sub, s.origin, iso)
    normal = dict(s.start.positions)

    def back_home(st, _ev):
        return all(p == normal[c] for c, p in st.positions if c in s.ct_set)

    back = s.search(end, back_home, [], s.ct_switches)
    return len(iso), None if back is None else len(back)


@pytest.mark.parametrize("breakers", [2, 4])
def test_bus_differential_plan_uses_the_relays_test_switch(breakers):
    """25 switches for four breakers (analysis.bench.engine). The relay's own trip first, even
    though the zone is balanced (R-87 reads 0 A under load whatever is shorted); then the
    test switch: three CT poles (each jaw makes before the knife breaks) and the neutral pole,
    which leave R-87 without current and free to remove. Shorting the breakers' sets at their
    blocks would also kill R-87's current, but would leave it joined to the summing bus. The
    restoration puts the same switches back in the reverse order. For two breakers the
    lengths are checked against breadth-first search over every CT-side switch (for four that
    search takes too long for a test)."""
    from analysis.bench.engine import bus_differential_site

    nl = build_netlist(bus_differential_site(breakers))
    plan = plan_isolation(nl, "R-87")
    assert [op.get("set") for op in plan.isolate] == [
        "TS-87/T1",
        "TS-87/1",
        "TS-87/2",
        "TS-87/3",
        "TS-87/N",
        None,
    ]
    assert plan.isolate[-1]["note"] == (
        "R-87 is free to remove: its inputs and outputs are opened at TS-87/T1, TS-87/1, "
        "TS-87/2, TS-87/3, TS-87/N"
    )
    assert [op.get("set") for op in plan.restore] == [
        "TS-87/N",
        "TS-87/3",
        "TS-87/2",
        "TS-87/1",
        None,
        "TS-87/T1",
    ]
    assert plan.verdict is not None and plan.verdict.safe
    if breakers == 2:
        assert _bfs_lengths(nl, "R-87") == (4, 4)


def test_a_device_with_nothing_to_isolate_is_reported_as_such():
    b = wye_panel()
    b.doc["devices"].append({"code": "86X", "kind": "other", "functions": ["86"]})
    plan = plan_isolation(build_netlist(b.build()), "86X")
    assert not plan.possible and plan.reason == "86X has no inputs or outputs to isolate"


def _balanced_zone():
    """A two-CT differential zone: CT-IN (breaker CB-IN) and CT-OUT (CB-OUT), both 400:5 at
    400 A load, summed at TB:S so that their secondary currents cancel (CT-OUT's tap is
    written X2 first: its current leaves X2, wired to TB:N). The summed current runs through
    test-switch pole TS/1 (jaw onto TS:SB, bonded to TB:N), then recorder D, then R-87's
    operating input, back to TB:N. R-87 trips through TS/T2."""
    b = SiteBuilder("ZON")
    b.block("TB")
    for eq, tap in (("CB-IN", ("X1", "X2")), ("CB-OUT", ("X2", "X1"))):
        b.equipment(eq, max_load_a=400)
        b.ct(f"CT-{eq[3:]}", equipment=eq, in_use=tap)
    b.wire("CT-IN:X1", "TB:S", 0.2)
    b.wire("CT-IN:X2", "TB:N", 0.2)
    b.wire("CT-OUT:X1", "TB:S", 0.2)
    b.wire("CT-OUT:X2", "TB:N", 0.2)
    b.ground("TB:N")
    b.ct_pole("TS/1", "TB:S", "TS:1R", "TS:SB")
    b.link("TS:SB", "TB:N")
    b.device("D", kind="recorder", functions=("DFR",), inputs=[("I", "TS:1R", "D:2", 0.05)])
    b.device(
        "R-87",
        functions=("87B",),
        inputs=[("IOP", "D:2", "TB:N", 0.1)],
        outputs=[("TRIP", "R-87:T", "86:COIL")],
    )
    b.trip_pole("TS/T2", "R-87:T", "TS:T2R")
    b.wire("TS:T2R", "86:COIL", 1.0)
    return build_netlist(b.build())


def test_a_balanced_differential_in_the_path_gets_its_trip_opened_too():
    """Taking recorder D out shorts the summed current at TS/1. Under load R-87 reads 0 A
    before and after (the zone balances: 5.00 A in, 5.00 A out), so no current rule of the
    checker asks for its trip; but from then on R-87 would not see a fault in the zone, and
    the crew's work is on its operating circuit: its trip is opened first and closed last
    (design.md, plans: "also where the currents alone would allow otherwise")."""
    nl = _balanced_zone()
    plan = plan_isolation(nl, "D")
    assert plan.possible
    assert _ops(plan.isolate)[:2] == [
        {"set": "TS/T2", "to": "open"},
        {"set": "TS/1", "to": "open"},
    ]
    assert plan.isolate[0]["why"] == (
        "open R-87's trip TRIP (R-87:T → 86:COIL): the work changes which CT currents reach "
        "R-87 IOP (it reads 0.00 A under load either way, but would see a fault wrongly)"
    )
    # the jaw carries the zone's balance, 0 A; D and R-87 read 0 A throughout
    assert plan.isolate[1]["readings"] == _r(
        [(("TS:1R", "D:2"), 0.0), (("D:2", "TB:N"), 0.0), (("TB:S", "TS:SB"), 0.0)]
    )
    assert [op.get("set") for op in plan.restore] == ["TS/1", None, "TS/T2"]
    assert plan.restore[1]["note"].endswith("R-87 IOP 0.00 A")


def _demo(name):
    import json
    from pathlib import Path

    path = Path(__file__).resolve().parents[3] / "fixtures" / "demo" / f"{name}.json"
    return build_netlist(json.loads(path.read_text()))


def _short(op):
    if "set" in op:
        return f"{op['set']} {op['to']}"
    if "add_jumper" in op:
        return "jumper " + "–".join(op["add_jumper"])
    return "remove " + op["remove_jumper"] if "remove_jumper" in op else "note"


@pytest.mark.parametrize(
    ("site", "device", "trips", "work"),
    [
        ("quillfen", "R-131", ["TS-131/T1"], ["R-131/CASE withdrawn"]),
        (
            "quillfen",
            "R-132",
            ["TS-132/T1", "TS-132/T2"],
            [f"TS-132/{p} open" for p in ("1", "2", "3", "N")],
        ),
        ("quillfen", "R-87B", ["TS-87B/T1"], [f"TS-87B/{p} open" for p in ("1", "2", "3", "N")]),
        (
            "quillfen",
            "R-87T",
            ["TS-87T/T1"],
            ["TB-T1X/SS shorted"]
            + [f"TS-87T/{p} open" for p in ("1", "2", "3", "N")]
            + [f"TB-T1X/SL{n} open" for n in (1, 2, 3)],
        ),
        ("orrinvale", "RL-L1", ["TB-L1/TL"], ["RL-L1/CASE withdrawn"]),
        ("orrinvale", "RL-L2", ["TS-L2/T1"], [f"TS-L2/{p} open" for p in ("1", "2", "3", "N")]),
        ("orrinvale", "RT2", ["TB-T2/TL"], [f"jumper TB-T2:{n}–TB-T2:4" for n in (1, 2, 3)]),
        (
            "orrinvale",
            "RG-T2",
            ["TB-T2N/TL"],
            ["TB-T2N/SS shorted", "TB-T2N/SL1 open", "TB-T2N/SL2 open"],
        ),
        ("orrinvale", "M-L1", [], [f"jumper TB-L1M:{n}–TB-L1M:4" for n in (1, 2, 3)]),
    ],
)
def test_demo_plans_are_those_the_demo_readme_describes(site, device, trips, work):
    """fixtures/demo/README.md, "Isolation plans": the trips, the CT work, the closing note;
    the restoration undoes the work in the reverse order, verifies, then closes the trips in
    the reverse order, and the whole plan passes its own check."""
    plan = plan_isolation(_demo(site), device)
    assert plan.possible and plan.verdict is not None and plan.verdict.safe
    assert [_short(op) for op in plan.isolate] == [f"{t} open" for t in trips] + work + ["note"]
    undo = []
    for op in reversed(_ops(plan.isolate)):
        if "set" in op and op["set"] not in trips:
            undo.append(op["set"])
        elif "add_jumper" in op:
            undo.append(op["id"])
    restored = [op.get("set") or op.get("remove_jumper") or "note" for op in plan.restore]
    assert restored == [*undo, "note", *trips[::-1]]


def test_a_lockout_relay_wired_straight_to_the_breakers_cannot_be_isolated():
    """fixtures/demo/README.md: 86B's outputs go to the four breakers' trip coils by wire."""
    plan = plan_isolation(_demo("quillfen"), "86B")
    assert not plan.possible and plan.isolate == ()
    assert "no switch is on the path of output TRIP-CB-130 (86B:1 → CB-130:TC)" in plan.reason
