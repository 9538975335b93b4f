"""IEEE C37.110 criteria against worked cases and electricpy (S7, S8, S25 of reference.md).

electricpy 0.3 (``electricpy.fault``, S8) computes, for a 5 A CT:
- ``ct_saturation(XoR, Imag, Vrated, Irated, CTR, Rb, Xb)`` → ((1 + X/R) · Imag/(Irated·CTR) ·
  |Rb + jXb| · 100 / Vrated, result >= 20): the per-unit index with the standard burden taken as
  Vrated/100 (= Vrated / (20 × 5 A)), flagging saturation at index ≥ 20.
- ``ct_cclass(XoR, Imag, Irated, CTR, Rb, Xb)`` → (1 + X/R) · Imag/(Irated·CTR) · |Z| · 100/20,
  the class voltage for which that index is exactly 20.
- ``ct_timetosat(Vknee, XoR, Rb, CTR, Imax, ts)`` → first sample before the flux-envelope curve
  "Vsat1" = Imax·Rb·(1 + X/R (1 - e^(-t/T1))) exceeds Vknee (resistive burden).
"""

from __future__ import annotations

import math
import random

import numpy as np
import pytest
from electricpy import fault as ep

from analysis.engine.ratings import (
    all_taps,
    build_ct_report,
    c37_110_index,
    evaluate_ct,
    passes_c37_110,
    required_class_voltage_v,
    saturation_index,
    tap_of,
    time_to_saturate_s,
)
from analysis.engine.ratings.site import SiteIndex
from tests.reference.test_ct_classes_reference import MULTI_RATIO
from trade.accuracy import (
    effective_alf,
    parse_accuracy,
)

OMEGA_60 = 2 * math.pi * 60


def test_worked_case_1_c400_12ka():
    # reference.md worked case 1 (S7; S8 agrees): 1200:5 C400 full tap, 12 kA = 10 pu, X/R 12,
    # Z_B 1.0 Ω → 13 × 10 × 0.25 = 32.5 > 20: saturates; about 650 V needed.
    tap = tap_of(MULTI_RATIO[1200][0], "X1-X5", 5)
    acc = parse_accuracy("C400")
    i_sec = 12000 / tap.ratio_value
    std = acc.standard_burden_ohm_at_tap(5, tap.turns_fraction)
    index = saturation_index(
        x_over_r=12, secondary_fault_a=i_sec, secondary_a=5, burden_ohm=1.0, standard_burden_ohm=std
    )
    assert index == pytest.approx(32.5)
    assert not passes_c37_110(index)
    assert required_class_voltage_v(
        x_over_r=12, secondary_fault_a=i_sec, burden_ohm=1.0
    ) == pytest.approx(650.0)
    result, saturated = ep.ct_saturation(12, 12000, 400, 5, 240, 1.0, 0.0)  # S8
    assert result == pytest.approx(index, rel=1e-12) and saturated


def test_worked_case_2_c800_24ka():
    # reference.md worked case 2 (S7): 1200:5 C800, 24 kA = 20 pu, X/R 3.73, Z_B 1.0 Ω
    # → 4.73 × 20 × 0.125 = 11.8 ≤ 20.
    index = c37_110_index(x_over_r=3.73, fault_pu=24000 / 1200, burden_pu=1.0 / 8.0)
    assert index == pytest.approx(11.825)
    assert passes_c37_110(index)


def test_worked_case_3_at_tap_through_the_site_path():
    # Worked case 3 (S4, S5) feeding the criterion: C800 at X2-X4 is C400 with 4 Ω, so worked
    # case 1's figures at 600:5 give 13 × 20 pu × 0.25 = 65.
    doc = _doc(
        terminals=MULTI_RATIO[1200][0],
        in_use=["X2", "X4"],
        accuracy="C800",
        fault_ka=12.0,
        x_over_r=12.0,
    )
    rating = evaluate_ct(SiteIndex(doc), "CT", {"ground_fault": 1.0, "phase_fault": 1.0})
    case = rating.cases["ground_fault"]
    assert case.c37_110_index == pytest.approx(13 * 20 * 0.25)
    assert case.index_fails


def test_worked_case_9_effective_alf():
    # reference.md worked case 9 (formula from memory): 5P20 15 VA 5 A → R_b,rated 0.6 Ω,
    # R_ct 0.2 Ω, actual 0.3 Ω → ALF' = 20 · 0.8 / 0.5 = 32.
    acc = parse_accuracy("5P20", rated_burden_va=15)
    assert acc.rated_burden_ohm(5) == pytest.approx(0.6)
    assert effective_alf(
        alf=acc.alf, winding_ohm=0.2, rated_burden_ohm=0.6, burden_ohm=0.3
    ) == pytest.approx(32.0)


def test_exactly_20_passes_here_but_electricpy_flags_it():
    # C37.110 states the criterion as ≤ 20 (S7); electricpy flags saturation at >= 20 (S8).
    # 1200:5 C400, X/R 1, 12 kA (10 pu), 4 Ω (1 pu) → exactly 20.
    result, saturated = ep.ct_saturation(1.0, 12000, 400, 5, 240, 4.0, 0.0)
    ours = saturation_index(
        x_over_r=1.0, secondary_fault_a=50.0, secondary_a=5, burden_ohm=4.0, standard_burden_ohm=4.0
    )
    assert result == ours == 20.0
    assert saturated and passes_c37_110(ours)


def _doc(*, terminals, in_use, accuracy, fault_ka, x_over_r, winding_ohm=0.3):
    return {
        "format": "loopkeep.site/1",
        "site": {"code": "TST"},
        "buses": [
            {
                "code": "B1",
                "ground_fault_ka": fault_ka,
                "three_phase_fault_ka": fault_ka,
                "x_over_r": x_over_r,
            }
        ],
        "equipment": [{"code": "E1", "bus": "B1", "max_load_a": 1.0}],
        "cts": [
            {
                "code": "CT",
                "equipment": "E1",
                "phase": "A",
                "secondary_a": 5,
                "terminals": terminals,
                "in_use": in_use,
                "accuracy": accuracy,
                "winding_ohm": winding_ohm,
            }
        ],
    }


def _generated_cases(n: int, seed: int = 20261201):
    rng = random.Random(seed)
    taps = [(full, t) for full, (pos, _) in MULTI_RATIO.items() for t in all_taps(pos, 5)]
    classes = ["C100", "C200", "C400", "C800", "K400", "T200"]
    cases = []
    for _ in range(n):
        full, tap = rng.choice(taps)
        cases.append(
            {
                "full": full,
                "tap": tap,
                "accuracy": rng.choice(classes),
                "x_over_r": rng.uniform(1.0, 40.0),
                "fault_a": rng.uniform(500.0, 80000.0),
                "r": rng.uniform(0.05, 6.0),
                "x": rng.choice([0.0, rng.uniform(0.0, 2.0)]),
            }
        )
    return cases


CASES_600 = _generated_cases(600)


def test_generated_cases_cover_both_outcomes():
    outcomes = set()
    for c in CASES_600:
        acc = parse_accuracy(c["accuracy"])
        v_tap = acc.voltage_at_tap_v(5, c["tap"].turns_fraction)
        _, saturated = ep.ct_saturation(
            c["x_over_r"], c["fault_a"], v_tap, 5, c["tap"].ratio_value, c["r"], c["x"]
        )
        outcomes.add(bool(saturated))
    assert outcomes == {True, False}


@pytest.mark.parametrize("chunk", range(6))
def test_index_and_pass_fail_agree_with_electricpy_over_600_cases(chunk):
    # S8: exact pass/fail agreement, index to 1e-12, across the multi-ratio taps of S4 and the
    # C57.13 classes, through the whole site-document path (tap, class at the tap, kA → A).
    for c in CASES_600[chunk * 100 : (chunk + 1) * 100]:
        tap = c["tap"]
        pos = MULTI_RATIO[c["full"]][0]
        doc = _doc(
            terminals=pos,
            in_use=list(tap.terminals),
            accuracy=c["accuracy"],
            fault_ka=c["fault_a"] / 1000.0,
            x_over_r=c["x_over_r"],
        )
        z = complex(c["r"], c["x"])
        case = evaluate_ct(SiteIndex(doc), "CT", {"ground_fault": z, "phase_fault": z}).cases[
            "ground_fault"
        ]
        acc = parse_accuracy(c["accuracy"])
        v_tap = acc.voltage_at_tap_v(5, tap.turns_fraction)
        result, saturated = ep.ct_saturation(
            c["x_over_r"], c["fault_a"], v_tap, 5, tap.ratio_value, c["r"], c["x"]
        )
        # Keep away from the one place the two differ by definition (exactly 20, see above).
        assert abs(result - 20.0) > 1e-9
        assert case.c37_110_index == pytest.approx(result, rel=1e-12)
        assert case.index_fails is bool(saturated)
        needed = ep.ct_cclass(c["x_over_r"], c["fault_a"], 5, tap.ratio_value, c["r"], c["x"])
        ours = required_class_voltage_v(
            x_over_r=c["x_over_r"], secondary_fault_a=case.secondary_fault_a, burden_ohm=z
        )
        assert ours == pytest.approx(needed, rel=1e-12)
        # The class passes exactly when it is at least the class voltage electricpy requires.
        assert (v_tap >= needed) is (not case.index_fails)


def test_time_to_saturate_matches_electricpy_envelope_over_500_cases():
    # S8 ct_timetosat "Vsat1" (resistive burden) against our closed form (S25 form; reference.md
    # eq. from memory). electricpy reports the last sample before the crossing, so ours must lie
    # within one sample step after it.
    rng = random.Random(7)
    ts = np.linspace(0, 0.1, 60 * 100)
    step = ts[1] - ts[0]
    checked = 0
    while checked < 500:
        x_over_r = rng.uniform(2.0, 40.0)
        i_f = rng.uniform(20.0, 400.0)
        r_s = rng.uniform(0.2, 5.0)
        ks = rng.uniform(1.05, 1.0 + x_over_r * 0.95)
        v_x = ks * i_f * r_s
        ours = time_to_saturate_s(
            x_over_r=x_over_r, saturation_emf_v=v_x, secondary_fault_a=i_f, total_burden_ohm=r_s
        )
        if ours is None or ours > 0.09:
            continue  # beyond electricpy's 100 ms window
        theirs, _, _ = ep.ct_timetosat(v_x, x_over_r, r_s, 1, i_f, ts=ts)
        assert theirs - 1e-12 <= ours <= theirs + step + 1e-12
        closed = -(x_over_r / OMEGA_60) * math.log(1 - (ks - 1) / x_over_r)  # reference.md
        assert ours == pytest.approx(closed, rel=1e-12)
        checked += 1


def test_time_to_saturate_none_when_envelope_never_reaches_saturation():
    # K_s - 1 ≥ X/R: no saturation (reference.md, from memory).
    assert (
        time_to_saturate_s(
            x_over_r=10,
            saturation_emf_v=11.0 * 100 * 1.0,
            secondary_fault_a=100,
            total_burden_ohm=1.0,
        )
        is None
    )


@pytest.mark.parametrize(
    ("x_over_r", "r", "x", "ks"),
    [(15.0, 1.0, 0.0, 6.0), (15.0, 1.0, 0.8, 6.0), (8.0, 0.5, 0.5, 3.0), (30.0, 2.0, 0.3, 12.0)],
)
def test_time_to_saturate_bounds_the_simulated_flux(x_over_r, r, x, ks):
    # Independent check by simulation (derived; no outside figure): an ideal CT carrying the
    # fully offset current i = √2 I_f (e^(-t/T1) - cos ωt) into R + jX has core flux
    # λ = ∫ (R i + L di/dt) dt. The envelope time must come no later than the first instant the
    # simulated flux reaches the saturation flux √2 V_x / ω, and within one cycle of it.
    i_f = 100.0
    z = complex(r, x)
    v_x = ks * i_f * abs(z)
    ours = time_to_saturate_s(
        x_over_r=x_over_r, saturation_emf_v=v_x, secondary_fault_a=i_f, total_burden_ohm=z
    )
    t1 = x_over_r / OMEGA_60
    t = np.linspace(0, 1.0, 1_000_001)
    ipk = math.sqrt(2) * i_f
    integral_i = ipk * (t1 * (1 - np.exp(-t / t1)) - np.sin(OMEGA_60 * t) / OMEGA_60)
    i = ipk * (np.exp(-t / t1) - np.cos(OMEGA_60 * t))
    flux = r * integral_i + (x / OMEGA_60) * i
    sat = math.sqrt(2) * v_x / OMEGA_60
    assert flux.max() >= sat  # it does saturate
    first = t[np.argmax(flux >= sat)]
    assert ours <= first + 1e-6
    assert first - ours < 1 / 60


def test_report_time_to_saturate_uses_the_class_emf():
    # End to end: 600:5 C400 at X1-X4, 15.2 kA, X/R 12, 0.72 Ω, winding 0.3 Ω full.
    # V_x = 266.7 V + 20 × 5 A × 0.2 Ω (from memory, see accuracy.saturation_emf_at_tap_v).
    doc = _doc(
        terminals=MULTI_RATIO[600][0],
        in_use=["X1", "X4"],
        accuracy="C400",
        fault_ka=15.2,
        x_over_r=12,
    )
    report = build_ct_report(
        doc, "CT", burdens={"ground_fault": 0.72, "phase_fault": 0.36}, devices_fed=[]
    )
    gf = report["cases"]["ground_fault"]
    i_f = 15200 / 80
    v_x = 400 * 400 / 600 + 20 * 5 * 0.2
    ks = v_x / (i_f * 0.92)
    expected_ms = -(12 / OMEGA_60) * math.log(1 - (ks - 1) / 12) * 1000
    assert gf["vx_available_v"] == pytest.approx(v_x, rel=1e-3)
    assert gf["vx_required_v"] == pytest.approx(13 * i_f * 0.92, rel=1e-3)
    assert gf["time_to_saturate_ms"] == pytest.approx(expected_ms, rel=1e-2)
    assert gf["c37_110_index"] == pytest.approx(13 * (i_f / 5) * (0.72 / (400 / 600 * 4)), rel=1e-3)
