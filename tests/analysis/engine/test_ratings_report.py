"""The CT report JSON of design.md ("CT report JSON"), built from a site document."""

from __future__ import annotations

import json

import pytest

from analysis.engine.ratings import build_ct_report, excitation_plot_inputs
from tests.analysis.engine.test_ratings_checks import BURDENS, site_doc

TOP_KEYS = [
    "site",
    "ct",
    "tap",
    "ratio",
    "turns",
    "winding_ohm_at_tap",
    "accuracy",
    "knee_point_v",
    "cases",
    "findings",
]
CASE_KEYS = {
    "burden_ohm",
    "fault_a",
    "secondary_fault_a",
    "x_over_r",
    "vx_required_v",
    "vx_available_v",
    "c37_110_index",
    "time_to_saturate_ms",
}


def test_shape_is_exactly_the_design():
    r = build_ct_report(site_doc(), "CB-1-A", burdens=BURDENS["CB-1-A"], devices_fed=["R-1"])
    assert list(r) == TOP_KEYS
    assert set(r["accuracy"]) == {"class", "voltage_at_tap_v", "standard_burden_ohm_at_tap"}
    assert set(r["knee_point_v"]) == {"ieee", "iec"}
    assert set(r["cases"]) == {"ground_fault", "phase_fault"}
    for case in r["cases"].values():
        assert set(case) == CASE_KEYS
        assert set(case["burden_ohm"]) == {"r", "x", "z"}
    for f in r["findings"]:
        assert {"code", "severity", "message"} <= set(f)
    json.dumps(r)  # plain JSON


def test_values_of_a_600_5_c400_at_x1_x4():
    # S4 taps, S5/S6 class at the tap, C37.110 (S7) with 7.5 kA ground / 9 kA phase, X/R 8.
    r = build_ct_report(site_doc(), "CB-1-A", burdens=BURDENS["CB-1-A"], devices_fed=["R-1"])
    assert r["site"] == "ELM" and r["ct"] == "CB-1-A"
    assert r["tap"] == ["X1", "X4"] and r["ratio"] == "400:5" and r["turns"] == 80
    assert r["winding_ohm_at_tap"] == pytest.approx(0.2)
    assert r["accuracy"] == {
        "class": "C400",
        "voltage_at_tap_v": pytest.approx(266.7),
        "standard_burden_ohm_at_tap": pytest.approx(2.667),
    }
    gf, pf = r["cases"]["ground_fault"], r["cases"]["phase_fault"]
    assert gf["fault_a"] == 7500 and pf["fault_a"] == 9000
    assert gf["secondary_fault_a"] == pytest.approx(93.75) and pf["secondary_fault_a"] == 112.5
    assert gf["x_over_r"] == 8
    assert gf["burden_ohm"] == {"r": 0.9, "x": 0.01, "z": pytest.approx(0.9001)}
    assert gf["c37_110_index"] == pytest.approx(9 * 18.75 * 0.90006 / 2.6667, rel=1e-3)
    assert pf["c37_110_index"] == pytest.approx(9 * 22.5 * 0.45 / 2.6667, rel=1e-3)
    # Voltage form: (1 + X/R) · I_f · |Z_s| with the winding in Z_s.
    assert gf["vx_required_v"] == pytest.approx(9 * 93.75 * abs(1.1 + 0.01j), rel=1e-3)
    assert gf["vx_available_v"] == pytest.approx(266.67 + 100 * 0.2, rel=1e-3)
    assert gf["time_to_saturate_ms"] > 0 and pf["time_to_saturate_ms"] > 0
    assert r["knee_point_v"]["ieee"] is not None and r["knee_point_v"]["iec"] is not None
    assert r["knee_point_v"]["ieee"] < r["knee_point_v"]["iec"]


def test_findings_include_devices_fed():
    doc = site_doc()
    doc["devices"][0]["ratio_setting"] = "600:5"
    doc["devices"][1]["inputs"][0]["rated_a"] = 1
    r = build_ct_report(doc, "CB-1-A", burdens=BURDENS["CB-1-A"], devices_fed=["R-1", "M-1"])
    found = {(f["code"], f["device"]) for f in r["findings"]}
    assert ("ratio_setting_mismatch", "R-1") in found
    assert ("input_rating_mismatch", "M-1") in found
    assert ("saturation_risk", None) in found
    assert all(f["ct"] == "CB-1-A" for f in r["findings"])
    # Not fed → not listed.
    r2 = build_ct_report(doc, "CB-1-A", burdens=BURDENS["CB-1-A"], devices_fed=[])
    assert not [f for f in r2["findings"] if f["device"]]


def test_nulls_where_values_are_missing():
    doc = site_doc()
    del doc["cts"][0]["excitation"]
    del doc["cts"][0]["winding_ohm"]
    del doc["buses"][0]["x_over_r"]
    r = build_ct_report(
        doc, "CB-1-A", burdens={"ground_fault": None, "phase_fault": 0.4}, devices_fed=[]
    )
    assert r["knee_point_v"] == {"ieee": None, "iec": None}
    assert r["winding_ohm_at_tap"] is None
    gf, pf = r["cases"]["ground_fault"], r["cases"]["phase_fault"]
    assert gf["burden_ohm"] is None and gf["c37_110_index"] is None
    assert pf["x_over_r"] is None and pf["vx_required_v"] is None
    assert pf["fault_a"] == 9000
    assert {f["code"] for f in r["findings"]} == {"missing_data"}


def test_neutral_ct_has_no_phase_fault_case():
    r = build_ct_report(site_doc(), "CB-1-N", burdens=BURDENS["CB-1-N"], devices_fed=["R-1"])
    assert all(v is None for v in r["cases"]["phase_fault"].values())
    assert r["cases"]["ground_fault"]["fault_a"] == 7500


def test_unknown_ct():
    with pytest.raises(KeyError, match="no CT 'NOPE'"):
        build_ct_report(site_doc(), "NOPE", burdens={}, devices_fed=[])


def test_excitation_plot_inputs():
    inputs = excitation_plot_inputs(site_doc(), "CB-1-A", burdens=BURDENS["CB-1-A"])
    # Curve scaled to 2/3 of the winding (S5, S6).
    assert inputs.curve_at_tap[0] == pytest.approx([0.005 * 1.5, 20 / 1.5])
    assert {p.case for p in inputs.operating_points} == {"ground_fault", "phase_fault"}
    gf = next(p for p in inputs.operating_points if p.case == "ground_fault")
    assert gf.symmetrical_v == pytest.approx(93.75 * abs(1.1 + 0.01j))
    assert gf.required_v == pytest.approx(9 * gf.symmetrical_v)
    assert excitation_plot_inputs(site_doc(), "CB-1-N", burdens=BURDENS["CB-1-N"]) is None


def test_site_ratings_equals_the_per_ct_calls():
    from analysis.engine.ratings import site_ratings, site_static_findings
    from tests.analysis.engine.test_ratings_checks import FEEDS

    doc = site_doc()
    doc["devices"][0]["ratio_setting"] = "600:5"
    both = site_ratings(doc, burdens=BURDENS, feeds=FEEDS)
    assert both.findings == site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    for ct in BURDENS:
        fed = sorted(d for d, cts in FEEDS.items() if ct in cts)
        assert both.reports[ct] == build_ct_report(doc, ct, burdens=BURDENS[ct], devices_fed=fed)
