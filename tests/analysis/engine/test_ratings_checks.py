"""Static checks: thermal, ratio setting, input rating, accuracy, saturation, missing data."""

from __future__ import annotations

import copy

import pytest
from hypothesis import given
from hypothesis import strategies as st

from analysis.engine import findings as fc
from analysis.engine.ratings import (
    accuracy_check,
    evaluate_ct,
    input_rating_check,
    ratio_setting_check,
    site_static_findings,
    tap_of,
    thermal_check,
)
from analysis.engine.ratings.site import SiteIndex
from trade.accuracy import (
    parse_accuracy,
)

POS_600 = {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600}


def site_doc() -> dict:
    """An invented site: one 600:5 C400 three-phase set at X1-X4, a neutral CT, a relay."""
    cts = [
        {
            "code": f"CB-1-{ph}",
            "equipment": "CB-1",
            "phase": ph,
            "set": "CB-1-R",
            "secondary_a": 5,
            "terminals": dict(POS_600),
            "in_use": ["X1", "X4"],
            "accuracy": "C400",
            "winding_ohm": 0.30,
            "rating_factor": 1.5,
            "excitation": [[0.005, 20], [0.02, 120], [0.06, 300], [0.2, 380], [1, 430]],
        }
        for ph in "ABC"
    ]
    cts.append(
        {
            "code": "CB-1-N",
            "equipment": "CB-1",
            "phase": "N",
            "secondary_a": 5,
            "terminals": {"X1": 0, "X2": 400},
            "in_use": ["X1", "X2"],
            "accuracy": "C100",
            "winding_ohm": 0.1,
        }
    )
    return {
        "format": "loopkeep.site/1",
        "site": {"code": "ELM", "name": "Elm Hollow 69/13.8 kV", "design_temp_c": 75},
        "buses": [
            {
                "code": "B69",
                "kv": 69,
                "three_phase_fault_ka": 9.0,
                "ground_fault_ka": 7.5,
                "x_over_r": 8,
            }
        ],
        "equipment": [
            {"code": "CB-1", "kind": "breaker", "bus": "B69", "in_service": True, "max_load_a": 320}
        ],
        "cts": cts,
        "devices": [
            {
                "code": "R-1",
                "kind": "relay",
                "functions": ["50", "51"],
                "ratio_setting": "400:5",
                "inputs": [
                    {
                        "name": n,
                        "from": f"R-1:{n}1",
                        "to": f"R-1:{n}2",
                        "rated_a": 5,
                        "burden_va": 0.2,
                        "pf": 1.0,
                    }
                    for n in ("IA", "IB", "IC", "IN")
                ],
            },
            {"code": "M-1", "kind": "meter", "inputs": [{"name": "IA", "rated_a": 5}]},
        ],
    }


BURDENS = {
    "CB-1-A": {"ground_fault": 0.9 + 0.01j, "phase_fault": 0.45},
    "CB-1-B": {"ground_fault": 0.9 + 0.01j, "phase_fault": 0.45},
    "CB-1-C": {"ground_fault": 0.9 + 0.01j, "phase_fault": 0.45},
    "CB-1-N": {"ground_fault": 0.5, "phase_fault": None},
}
FEEDS = {"R-1": {"CB-1-A", "CB-1-B", "CB-1-C", "CB-1-N"}, "M-1": {"CB-1-A"}}


def codes(findings, code=None, ct=None, device=None):
    return [
        f
        for f in findings
        if (code is None or f.code == code)
        and (ct is None or f.ct == ct)
        and (device is None or f.device == device)
    ]


# --- single checks ----------------------------------------------------------------------------


def test_thermal_limit_is_tap_times_rating_factor():
    # IEEE C57.13 continuous thermal rating factor (S1): 400 A tap × 1.5 = 600 A.
    tap = tap_of(POS_600, "X1-X4", 5)
    assert thermal_check(ct="CT", max_load_a=600, tap=tap, rating_factor=1.5) is None
    f = thermal_check(ct="CT", max_load_a=601, tap=tap, rating_factor=1.5)
    assert f.code == fc.THERMAL_OVERLOAD and f.severity == "warning"
    assert "601 A" in f.message and "600 A" in f.message and "X1-X4 (400:5)" in f.message
    assert f.numbers["limit_a"] == 600


def test_ratio_setting_compares_numbers():
    tap = tap_of(POS_600, "X1-X4", 5)
    assert ratio_setting_check(device="R", setting="400:5", ct="CT", tap=tap) is None
    assert ratio_setting_check(device="R", setting="80:1", ct="CT", tap=tap) is None
    f = ratio_setting_check(device="R", setting="600:5", ct="CT", tap=tap)
    assert f.code == fc.RATIO_SETTING_MISMATCH and f.severity == "danger"
    assert "600:5" in f.message and "400:5" in f.message
    assert "1.5 ×" in f.message  # the relay scales by 120 where the CT gives 80


def test_input_rating():
    inputs = [{"name": "IA", "rated_a": 1}]
    f = input_rating_check(device="R", inputs=inputs, ct="CT", secondary_a=5)
    assert f.code == fc.INPUT_RATING_MISMATCH and f.input == "IA"
    assert "5 A secondary" in f.message and "IA 1 A" in f.message
    assert input_rating_check(device="R", inputs=inputs, ct="CT", secondary_a=1) is None
    assert input_rating_check(device="R", inputs=[{"name": "IA"}], ct="CT", secondary_a=5) is None


def test_accuracy_exceeded_at_the_tap():
    # S5, S6: C400 at 400:5 of 600:5 supports 2.667 Ω.
    tap = tap_of(POS_600, "X1-X4", 5)
    acc = parse_accuracy("C400")
    assert (
        accuracy_check(ct="CT", accuracy=acc, tap=tap, burden_ohm=2.6, case="ground_fault") is None
    )
    f = accuracy_check(ct="CT", accuracy=acc, tap=tap, burden_ohm=2.7 + 0.2j, case="ground_fault")
    assert f.code == fc.ACCURACY_EXCEEDED and "2.667 Ω" in f.message


def test_accuracy_exceeded_iec_quotes_alf_effective():
    # Worked case 9 numbers, reversed: 5P20 15 VA (0.6 Ω), R_ct 0.2 Ω, actual 1.0 Ω
    # → ALF' = 20 · 0.8 / 1.2 = 13.3 (formula from memory).
    tap = tap_of({"X1": 0, "X2": 400}, "X1-X2", 5)
    acc = parse_accuracy("5P20", rated_burden_va=15)
    f = accuracy_check(
        ct="CT", accuracy=acc, tap=tap, burden_ohm=1.0, case="ground_fault", winding_ohm=0.2
    )
    assert f.numbers["alf_effective"] == pytest.approx(20 * 0.8 / 1.2)
    assert "13.3" in f.message


# --- a whole site -----------------------------------------------------------------------------


def test_clean_site_has_only_expected_findings():
    findings = site_static_findings(site_doc(), burdens=BURDENS, feeds=FEEDS)
    # 7.5 kA / 80 = 93.75 A (18.75 pu), X/R 8, 0.9 Ω / 2.667 Ω → index 9 × 18.75 × 0.3375 = 57
    sat = codes(findings, fc.SATURATION_RISK, ct="CB-1-A")
    assert {f.numbers["case"] for f in sat} == {"ground_fault", "phase_fault"}
    gf = next(f for f in sat if f.numbers["case"] == "ground_fault")
    assert gf.numbers["c37_110_index"] == pytest.approx(
        9 * 18.75 * 0.9000555 / (400 / 600 * 4), rel=1e-4
    )
    assert not codes(findings, fc.RATIO_SETTING_MISMATCH)
    assert not codes(findings, fc.INPUT_RATING_MISMATCH)
    assert not codes(findings, fc.THERMAL_OVERLOAD)
    assert not codes(findings, fc.MISSING_DATA)
    # The neutral CT has no phase-fault case.
    assert all(f.numbers.get("case") != "phase_fault" for f in codes(findings, ct="CB-1-N"))


def test_tap_change_without_setting_change_is_a_danger():
    doc = site_doc()
    doc["cts"][1]["in_use"] = ["X1", "X5"]  # B phase moved to 600:5, the relay still at 400:5
    findings = site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    mism = codes(findings, fc.RATIO_SETTING_MISMATCH)
    assert [(f.device, f.ct) for f in mism] == [("R-1", "CB-1-B")]


def test_neutral_ct_ratio_is_checked_as_well():
    doc = site_doc()
    doc["cts"][3]["terminals"] = {"X1": 0, "X2": 200}
    findings = site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    assert [f.ct for f in codes(findings, fc.RATIO_SETTING_MISMATCH)] == ["CB-1-N"]


def test_input_rating_mismatch_on_one_amp_ct():
    doc = site_doc()
    doc["cts"][0]["secondary_a"] = 1
    doc["cts"][0]["terminals"] = {"X1": 0, "X4": 80}  # 80:1, same ratio value as 400:5
    findings = site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    mism = codes(findings, fc.INPUT_RATING_MISMATCH, ct="CB-1-A")
    assert sorted(f.device for f in mism) == ["M-1", "R-1"]
    assert not codes(findings, fc.RATIO_SETTING_MISMATCH)  # 80:1 == 400:5


def test_thermal_overload_in_site():
    doc = site_doc()
    doc["equipment"][0]["max_load_a"] = 700
    findings = site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    over = codes(findings, fc.THERMAL_OVERLOAD)
    # 400 × 1.5 = 600 A for the phase CTs (IEEE C57.13 rating factor, S1). The neutral CT
    # (400 A × 1.0) carries the unbalance of the phases, about 0 A with a balanced load, not
    # the 700 A of each phase: no thermal finding (common practice, no source), and no
    # "missing max_load_a" notice either.
    assert sorted(f.ct for f in over) == ["CB-1-A", "CB-1-B", "CB-1-C"]
    assert not [f for f in findings if f.ct == "CB-1-N" and "thermal" in f.message]


def test_missing_fault_level_and_xr_are_notices():
    doc = site_doc()
    del doc["buses"][0]["ground_fault_ka"]
    del doc["buses"][0]["x_over_r"]
    findings = site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    miss = codes(findings, fc.MISSING_DATA, ct="CB-1-A")
    assert len(miss) == 2
    gf = next(f for f in miss if f.numbers["case"] == "ground_fault")
    assert gf.numbers["missing"] == ["fault current", "X/R"] and gf.severity == "notice"
    assert "X/R" in next(f for f in miss if f.numbers["case"] == "phase_fault").message


def test_missing_bus_burden_class_and_setting():
    doc = site_doc()
    doc["equipment"][0]["bus"] = None
    doc["cts"][2]["accuracy"] = None
    del doc["devices"][0]["ratio_setting"]
    burdens = copy.deepcopy(BURDENS)
    del burdens["CB-1-B"]
    findings = site_static_findings(doc, burdens=burdens, feeds=FEEDS)
    msgs = [f.message for f in codes(findings, fc.MISSING_DATA)]
    assert any("bus of equipment 'CB-1'" in m for m in msgs)
    assert any(m.startswith("CB-1-B") and "burden" in m for m in msgs)
    assert any(m.startswith("CB-1-C: no accuracy class") for m in msgs)
    assert sum(m.startswith("R-1: no ratio setting") for m in msgs) == 1


def test_unknown_class_and_bad_tap_do_not_stop_the_site():
    doc = site_doc()
    doc["cts"][0]["accuracy"] = "Z999"
    doc["cts"][1]["in_use"] = ["X1", "X9"]
    findings = site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    msgs = [f.message for f in codes(findings, fc.MISSING_DATA)]
    assert any("CB-1-A: accuracy class not understood" in m for m in msgs)
    assert any("CB-1-B: ratings not computed" in m and "X9" in m for m in msgs)
    assert codes(findings, fc.SATURATION_RISK, ct="CB-1-C")


def test_ratio_setting_per_ct_set_and_list():
    doc = site_doc()
    doc["cts"][3]["terminals"] = {"X1": 0, "X2": 200}
    doc["devices"][0]["ratio_setting"] = {"CB-1-R": "400:5", "CB-1-N": "200:5"}
    assert not codes(
        site_static_findings(doc, burdens=BURDENS, feeds=FEEDS), fc.RATIO_SETTING_MISMATCH
    )
    doc["devices"][0]["ratio_setting"] = ["400:5", "300:5"]
    mism = codes(site_static_findings(doc, burdens=BURDENS, feeds=FEEDS), fc.RATIO_SETTING_MISMATCH)
    assert [f.ct for f in mism] == ["CB-1-N"]  # 200:5 is in neither


def test_metering_class_gets_no_saturation_check():
    doc = site_doc()
    doc["cts"][0]["accuracy"] = "0.3B0.9"
    findings = site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    assert not codes(findings, fc.SATURATION_RISK, ct="CB-1-A")
    # 0.9 Ω at 2/3 of the winding → 0.6 Ω supported; 0.9 Ω exceeds it.
    acc = codes(findings, fc.ACCURACY_EXCEEDED, ct="CB-1-A")
    assert len(acc) == 1 and "0.6 Ω" in acc[0].message


@given(st.floats(min_value=0.05, max_value=5.0), st.floats(min_value=1.05, max_value=3.0))
def test_index_grows_with_burden(r, factor):
    # Invariant: more burden never lowers the C37.110 index or lengthens time to saturate.
    doc = site_doc()
    index = SiteIndex(doc)
    lo = evaluate_ct(index, "CB-1-A", {"ground_fault": r, "phase_fault": r}).cases["ground_fault"]
    hi = evaluate_ct(index, "CB-1-A", {"ground_fault": r * factor, "phase_fault": r}).cases[
        "ground_fault"
    ]
    assert hi.c37_110_index > lo.c37_110_index
    assert hi.vx_required_v > lo.vx_required_v
    if lo.time_to_saturate_ms is not None:
        assert hi.time_to_saturate_ms is not None
        assert hi.time_to_saturate_ms <= lo.time_to_saturate_ms


def test_finding_follows_the_per_unit_criterion():
    # C37.110 per-unit criterion (S7) decides; the voltage form, stricter when (1 + X/R)·I_F
    # exceeds 20 because it also counts the winding drop, is shown but does not raise it alone.
    from analysis.engine.ratings import SaturationCase, saturation_findings

    tap = tap_of(POS_600, "X1-X4", 5)
    base = {
        "case": "ground_fault",
        "fault_a": 7500.0,
        "secondary_fault_a": 93.75,
        "x_over_r": 8.0,
        "burden_ohm": 0.2 + 0j,
        "winding_ohm": 0.2,
        "limit": 20.0,
    }
    only_voltage = SaturationCase(
        **base,
        vx_required_v=337.5,
        vx_available_v=286.7,
        c37_110_index=12.7,
        time_to_saturate_ms=9.0,
    )
    assert only_voltage.voltage_fails and not only_voltage.index_fails
    assert saturation_findings(ct="CT", tap=tap, result=only_voltage) == []
    px = SaturationCase(
        **base | {"limit": None},
        vx_required_v=337.5,
        vx_available_v=200.0,
        c37_110_index=None,
        time_to_saturate_ms=4.0,
    )
    (f,) = saturation_findings(ct="CT", tap=tap, result=px)
    assert f.code == fc.SATURATION_RISK and "voltage form needs 337.5 V, has 200 V" in f.message
    assert "about 4 ms" in f.message


def test_iec_p_class_uses_its_alf_as_limit():
    # 5P10 30 VA at 5 A: R_b,rated 1.2 Ω (S10); at full tap 400:5, 4 kA = 10 pu, X/R 0,
    # burden 1.2 Ω → index (1 + 0) · 10 · 1 = 10 = ALF: passes; 1.3 Ω fails.
    doc = site_doc()
    doc["cts"][0].update(
        accuracy="5P10", rated_burden_va=30, terminals={"X1": 0, "X2": 400}, in_use=["X1", "X2"]
    )
    doc["buses"][0].update(ground_fault_ka=4.0, three_phase_fault_ka=4.0, x_over_r=0.0)
    index = SiteIndex(doc)
    ok = evaluate_ct(index, "CB-1-A", {"ground_fault": 1.2, "phase_fault": 1.2})
    assert ok.cases["ground_fault"].c37_110_index == pytest.approx(10.0)
    assert not codes(ok.findings, fc.SATURATION_RISK)
    bad = evaluate_ct(index, "CB-1-A", {"ground_fault": 1.3, "phase_fault": 1.0})
    (f,) = codes(bad.findings, fc.SATURATION_RISK)
    assert "> 10" in f.message
    (acc,) = codes(bad.findings, fc.ACCURACY_EXCEEDED)
    assert acc.numbers["alf_effective"] == pytest.approx(10 * (0.3 + 1.2) / (0.3 + 1.3))


def test_px_needs_its_knee():
    doc = site_doc()
    doc["cts"][0]["accuracy"] = "PX"
    findings = evaluate_ct(SiteIndex(doc), "CB-1-A", BURDENS["CB-1-A"]).findings
    assert any("PX without knee_v" in f.message for f in codes(findings, fc.MISSING_DATA))
    doc["cts"][0]["knee_v"] = 2000
    findings = evaluate_ct(SiteIndex(doc), "CB-1-A", BURDENS["CB-1-A"]).findings
    assert not codes(findings, fc.MISSING_DATA)
    assert not codes(findings, fc.SATURATION_RISK)  # 2000 V × 2/3 is ample here


def test_transient_class_and_bad_numbers_are_missing_data():
    doc = site_doc()
    doc["cts"][0]["accuracy"] = "TPY"
    doc["cts"][1]["winding_ohm"] = "n/a"
    findings = site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    msgs = [f.message for f in codes(findings, fc.MISSING_DATA)]
    assert any(m.startswith("CB-1-A: transient class TPY") for m in msgs)
    assert any(m.startswith("CB-1-B: no winding_ohm") for m in msgs)
    assert not codes(findings, fc.SATURATION_RISK, ct="CB-1-A")


def test_effective_alf_per_case_worked_case_9():
    # reference.md worked case 9 (formula from memory): 5P20 15 VA, 5 A, R_ct 0.2 Ω,
    # actual 0.3 Ω → ALF' = 32, at the full winding.
    doc = site_doc()
    doc["cts"][0].update(
        accuracy="5P20",
        rated_burden_va=15,
        winding_ohm=0.2,
        terminals={"X1": 0, "X2": 400},
        in_use=["X1", "X2"],
    )
    rating = evaluate_ct(SiteIndex(doc), "CB-1-A", {"ground_fault": 0.3, "phase_fault": 0.6})
    assert rating.cases["ground_fault"].alf_effective == pytest.approx(32.0)
    assert rating.cases["phase_fault"].alf_effective == pytest.approx(20.0)


def test_iec_p_class_with_a_large_winding_resistance_is_a_saturation_risk():
    # 5P20, 10 VA, 1 A, 200:1, R_ct 8 Ω, external burden 1 Ω, fault 15 × rated, X/R 10.
    # Per-unit index (1 + 10) · 15 · (1 / 10) = 16.5 passes the 20 limit, but the e.m.f. needed,
    # (1 + X/R) · I_f · (R_ct + R_b) = 11 · 15 · 9 = 1485 V, is far above the accuracy limit
    # e.m.f. E_al = ALF · I_n · (R_ct + R_bn) = 20 · 1 · 18 = 360 V (IEC 61869-2 definition of
    # E_al, S10; the offset factor (1 + X/R) as in C37.110, S7). Figures derived by hand.
    from analysis.engine.ratings.checks import saturation_findings
    from analysis.engine.ratings.saturation import SaturationCase
    from analysis.engine.ratings.taps import tap_of

    case = SaturationCase(
        case="ground_fault",
        fault_a=3000.0,
        secondary_fault_a=15.0,
        x_over_r=10.0,
        burden_ohm=complex(1.0, 0.0),
        winding_ohm=8.0,
        vx_required_v=1485.0,
        vx_available_v=360.0,
        c37_110_index=16.5,
        limit=20.0,
        time_to_saturate_ms=4.8,
        alf_effective=40.0,
    )
    tap = tap_of({"S1": 0, "S2": 200}, ["S1", "S2"], 1)
    findings = saturation_findings(ct="L9-A", tap=tap, result=case)
    assert [f.code for f in findings] == ["saturation_risk"]
    assert "1485 V" in findings[0].message and "360 V" in findings[0].message
    # The same figures on an IEEE C class (no ALF) are judged by the per-unit index alone.
    ieee = SaturationCase(
        **{**{f: getattr(case, f) for f in case.__slots__}, "alf_effective": None}
    )
    assert saturation_findings(ct="L9-A", tap=tap, result=ieee) == []
