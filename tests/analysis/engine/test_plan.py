"""Isolation plans: shortest safe sequences, restoration, collateral, impossible cases."""

from __future__ import annotations

import pytest

from analysis.engine import ProcedureError, build_netlist, check_operations, plan_isolation
from analysis.engine.cautions import cautions
from tests.analysis.engine.builders import SiteBuilder, wye_panel
from tests.analysis.engine.test_state_checks import residual_panel


def test_test_switch_panel_trip_first_then_the_ct_poles():
    nl = build_netlist(wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2).build())
    plan = plan_isolation(nl, "R-1")
    assert plan.possible
    assert list(plan.isolate) == [
        {"set": "TS-1/T1", "to": "open"},
        {"set": "TS-1/A", "to": "open"},
        {"set": "TS-1/B", "to": "open"},
        {"set": "TS-1/C", "to": "open"},
    ]
    assert list(plan.restore) == [
        {"set": "TS-1/A", "to": "closed"},
        {"set": "TS-1/B", "to": "closed"},
        {"set": "TS-1/C", "to": "closed"},
        {"set": "TS-1/T1", "to": "closed"},
    ]
    assert plan.affected == ()
    assert plan.verdict is not None and plan.verdict.safe


def test_draw_out_case_takes_two_steps():
    nl = build_netlist(wye_panel(test_switch=True, trip=True, draw_out=True).build())
    plan = plan_isolation(nl, "R-1")
    assert list(plan.isolate) == [
        {"set": "TS-1/T1", "to": "open"},
        {"set": "DC-1", "to": "withdrawn"},
    ]
    assert list(plan.restore) == [
        {"set": "DC-1", "to": "inserted"},
        {"set": "TS-1/T1", "to": "closed"},
    ]


def test_break_before_make_poles_need_temporary_jumpers_at_the_terminal_block():
    nl = build_netlist(
        wye_panel(test_switch=True, trip=True, transition="break_before_make").build()
    )
    plan = plan_isolation(nl, "R-1")
    assert plan.possible
    assert plan.isolate[0] == {"set": "TS-1/T1", "to": "open"}
    jumpers = [op["add_jumper"] for op in plan.isolate if "add_jumper" in op]
    assert sorted(jumpers) == [["TB-1:A", "TB-1:N"], ["TB-1:B", "TB-1:N"], ["TB-1:C", "TB-1:N"]]
    assert plan.restore[-1] == {"set": "TS-1/T1", "to": "closed"}
    assert sum("remove_jumper" in op for op in plan.restore) == 3
    assert check_operations(nl, [*plan.isolate, *plan.restore], ["R-1"]).safe


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


def test_collateral_names_the_other_device_and_its_functions():
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
    assert list(plan.isolate) == [{"set": "TS/T1", "to": "open"}, {"set": "TS/1", "to": "open"}]
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


def test_restoration_puts_every_ct_pole_back_before_the_trips():
    """Phase relay R-50 in series with residual relay R-50N: both trips out first (shorting
    one phase makes a residual current appear at R-50N), and on the way back the trips only
    once the three CT poles are closed, since R-50N's input carries a phase current until
    then (restore the CT circuits, verify, then restore the trips; common practice, no
    source)."""
    nl = build_netlist(residual_panel().build())
    plan = plan_isolation(nl, "R-50")
    assert plan.possible
    assert list(plan.isolate) == [
        {"set": "TS-1/T1", "to": "open"},
        {"set": "TS-1/T2", "to": "open"},
        {"set": "TS-1/A", "to": "open"},
        {"set": "TS-1/B", "to": "open"},
        {"set": "TS-1/C", "to": "open"},
    ]
    assert list(plan.restore) == [
        {"set": "TS-1/A", "to": "closed"},
        {"set": "TS-1/B", "to": "closed"},
        {"set": "TS-1/C", "to": "closed"},
        {"set": "TS-1/T1", "to": "closed"},
        {"set": "TS-1/T2", "to": "closed"},
    ]
    assert plan.verdict is not None and plan.verdict.safe


def test_demo_feeder_restoration_closes_the_ct_poles_before_the_trips():
    """fixtures/demo/quillfen.json, R-132 with R-132N in its neutral (fixtures/demo/README.md):
    the restoration closes TS-132/1..3 before TS-132/T1 and /T2."""
    import json
    from pathlib import Path

    doc = json.loads(
        (Path(__file__).resolve().parents[3] / "fixtures" / "demo" / "quillfen.json").read_text()
    )
    plan = plan_isolation(build_netlist(doc), "R-132")
    assert plan.possible and plan.verdict is not None and plan.verdict.safe
    order = [op["set"] for op in plan.restore]
    assert sorted(order) == ["TS-132/1", "TS-132/2", "TS-132/3", "TS-132/T1", "TS-132/T2"]
    assert max(order.index(f"TS-132/{n}") for n in "123") < min(
        order.index(t) for t in ("TS-132/T1", "TS-132/T2")
    )


def _bfs_lengths(nl, device):
    """Lengths of the isolation and restoration found by plain breadth-first search over
    every switch of the device's region (the exhaustive search the faster one must match)."""
    from analysis.engine.plan import _Search
    from analysis.engine.procedure import region_mask, subnet, touched_terminals
    from analysis.engine.state import apply_op

    seeds, _ = touched_terminals(nl, [], (device,))
    sub = subnet(nl, region_mask(nl, seeds, []))
    s = _Search(sub, device)
    iso = s.search(s.start, lambda _st, ev: s.isolated(ev), [])
    if iso is None:
        return None, None
    end = s.start
    for op in iso:
        _, end = apply_op(sub, end, op, 0)
    back = s.search(end, lambda st, _ev: st.positions == s.start.positions, [])
    return len(iso), None if back is None else len(back)


@pytest.mark.parametrize(
    ("breakers", "isolate"),
    [
        # two breakers: shorting each set at its block (2) is shorter than the 3 CT poles
        (2, ["TS-87/T1", "TB-0D/SS", "TB-1D/SS"]),
        # four breakers: the 3 CT poles of the test switch are shorter than 4 shorting screws
        (4, ["TS-87/T1", "TS-87/1", "TS-87/2", "TS-87/3"]),
    ],
)
def test_bus_differential_zone_gets_a_shortest_plan(breakers, isolate):
    """25 switches for four breakers (analysis.engine.bench): the trip first, then the fewest
    shorting operations that leave R-87 without current; the restoration puts back the same
    switches. For two breakers the lengths are checked against breadth-first search over
    every switch (for four that search takes about 0.7 s)."""
    from analysis.engine.bench import bus_differential_site

    nl = build_netlist(bus_differential_site(breakers))
    plan = plan_isolation(nl, "R-87")
    assert [op["set"] for op in plan.isolate] == isolate
    assert sorted(op["set"] for op in plan.restore) == sorted(isolate)
    assert plan.verdict is not None and plan.verdict.safe
    if breakers == 2:
        assert _bfs_lengths(nl, "R-87") == (3, 3)


def test_a_device_with_nothing_to_isolate_is_reported_as_such():
    b = wye_panel()
    b.doc["devices"].append({"code": "86X", "kind": "other", "functions": ["86"]})
    plan = plan_isolation(build_netlist(b.build()), "86X")
    assert not plan.possible and plan.reason == "86X has no inputs or outputs to isolate"
