"""Isolation plans: shortest safe sequences, restoration, collateral, impossible cases."""

from __future__ import annotations

import pytest

from analysis.engine import ProcedureError, build_netlist, check_operations, plan_isolation
from analysis.engine.cautions import cautions
from tests.analysis.engine.builders import SiteBuilder, wye_panel


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
