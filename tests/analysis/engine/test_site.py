"""analyze_site: everything the fleet recompute stores, in one call; and the bench runs."""

from __future__ import annotations

import pytest

from analysis.bench import engine as bench
from analysis.engine import analyze_site, build_netlist
from tests.analysis.engine.builders import wye_panel


def test_analyze_site_gives_circuits_burdens_findings_and_verdicts():
    b = wye_panel(test_switch=True, trip=True, ground=False, code="AS1")
    b.procedure(
        "P-OK", [{"set": "TS-1/T1", "to": "open"}, {"set": "TS-1/A", "to": "open"}], ("R-1",)
    )
    b.procedure("P-BAD", [{"set": "TS-1/A", "to": "open"}], ("R-1",))
    b.procedure("P-TYPO", [{"set": "TS-1/Z", "to": "open"}], ("R-1",))
    result = analyze_site(build_netlist(b.build()))
    assert result.site == "AS1"
    assert [c.id for c in result.circuits] == ["CKT-CB-1-A"]
    # reference.md case 6 values (wye, 0.5 Ω leads, 0.1 Ω relay): 1.1 Ω and 0.6 Ω
    assert result.burden_map()["CB-1-A"] == {
        "ground_fault": pytest.approx(1.1),
        "phase_fault": pytest.approx(0.6),
    }
    assert result.feeds == {"R-1": {"CB-1-A", "CB-1-B", "CB-1-C"}}
    assert [(f.code, f.circuit) for f in result.findings] == [("no_ground", "CKT-CB-1-A")]
    assert result.verdicts["P-OK"].safe
    assert not result.verdicts["P-BAD"].safe
    assert result.procedure_errors == {
        "P-TYPO": "step 1 (/procedures/2/steps/0/set): unknown switch 'TS-1/Z' (did you mean "
        "'TS-1/A' or 'TS-1/B' or 'TS-1/C'?)"
    }


def test_bench_runs_on_a_small_fleet(capsys):
    assert bench.main(["--circuits", "40", "--sites", "4", "--repeat", "1"]) == 0
    out = capsys.readouterr().out
    assert "circuits/s" in out and "30 steps" in out and "possible=True" in out


def test_release_leaves_the_netlist_to_reference_counting():
    """After ``release`` nothing ties the netlist into a cycle, so it is freed the moment the
    last reference goes, without the cyclic collector (which ``compute_site`` holds off while
    it runs; ~7,000 objects a fleet site were left for it before). Our own property, no
    outside source."""
    import gc
    import weakref

    from analysis.engine import release

    b = wye_panel(test_switch=True, trip=True, ground=False, code="RL1")
    b.procedure("P-BAD", [{"set": "TS-1/A", "to": "open"}], ("R-1",))
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        netlist = build_netlist(b.build())
        result = analyze_site(netlist)
        assert not result.verdicts["P-BAD"].safe
        assert netlist.cache  # the analysis cached its work on the netlist
        release(netlist)
        gone = weakref.ref(netlist)
        del netlist, result
        assert gone() is None
    finally:
        if was_enabled:
            gc.enable()


def test_ct_case_rows_carry_the_result_columns_in_order():
    """``compute_site``'s CT case rows hold the keys of the result table's columns
    (``CASE_VALUES`` after the burden), in that order, for every CT and case."""
    from analysis.compute import CASE_VALUES, CASES, compute_site

    b = wye_panel(test_switch=True, trip=True, ground=False, code="RW1")
    rows = compute_site(b.build()).ct_cases
    assert [(r["ct"], r["case"]) for r in rows] == [
        (ct, case) for ct in ("CB-1-A", "CB-1-B", "CB-1-C") for case in CASES
    ]
    keys = ["ct", "case", "burden_r_ohm", "burden_x_ohm", "burden_z_ohm", *CASE_VALUES]
    assert all(list(r) == keys for r in rows)
    # reference.md case 6 (wye, 0.5 Ω leads, 0.1 Ω relay): 1.1 Ω in the ground-fault case
    assert rows[0]["burden_z_ohm"] == pytest.approx(1.1)
