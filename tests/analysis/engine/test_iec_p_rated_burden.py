"""An IEC 61869-2 P class without its rated output: the ratings say so and compute nothing from
a guessed burden.

IEC 61869-2 (S10, designation from memory): a protection class is written with its rated
output, e.g. ``15 VA 5P20`` — 5 % composite error at 20 × rated current (the accuracy limit
factor, ALF) *into the rated burden*. Without the VA the ALF has no burden to refer to, so the
accuracy limit e.m.f. E_al = ALF · I_n · (R_ct + R_b,rated), the effective ALF' for the actual
burden and the accuracy check cannot be worked out. The record accepts such a CT (old drawings
often give the class alone, and a record with the class is better than one without) and the
ratings report it as ``missing_data`` naming ``rated_burden_va`` (design: "a check could not
run; says which value is missing"), the same way as a PX class without ``knee_v`` and a CT with
no class at all. These tests hold that: no figure where the rated burden is needed, the notice
naming the value, and the figures back as soon as the value is given (in the field or in the
class text ``30VA 5P20``).
"""

from __future__ import annotations

import pytest

from analysis.engine import findings as fc
from analysis.engine.ratings import evaluate_ct
from analysis.engine.ratings.site import SiteIndex


def site_doc(ct_extra: dict) -> dict:
    """An invented site: one 600:1 5P20 CT (R_ct 2.5 Ω) on a 6.5 kA bus, feeding nothing."""
    ct = {
        "code": "F1-A",
        "equipment": "F1",
        "phase": "A",
        "secondary_a": 1,
        "terminals": {"S1": 0, "S2": 600},
        "in_use": ["S1", "S2"],
        "accuracy": "5P20",
        "winding_ohm": 2.5,
        "rating_factor": 1.2,
    } | ct_extra
    return {
        "format": "loopkeep.site/1",
        "site": {"code": "PWB", "name": "Pinewell 132/33 kV", "design_temp_c": 75},
        "buses": [
            {
                "code": "B33",
                "kv": 33,
                "three_phase_fault_ka": 8.0,
                "ground_fault_ka": 6.5,
                "x_over_r": 8,
            }
        ],
        "equipment": [
            {"code": "F1", "kind": "line", "bus": "B33", "in_service": True, "max_load_a": 400}
        ],
        "cts": [ct],
    }


# A burden far above anything a 5P20 of a usual rated output carries at 20 × I_n: had the
# ratings guessed a rated burden, a figure or a saturation warning would show it.
BURDENS = {"ground_fault": 60.0, "phase_fault": 60.0}


def test_p_class_without_rated_output_is_missing_data_and_no_figures():
    rating = evaluate_ct(SiteIndex(site_doc({})), "F1-A", BURDENS)
    (notice,) = [f for f in rating.findings if f.code == fc.MISSING_DATA]
    assert notice.message == "F1-A: class 5P20 without rated_burden_va"
    assert notice.severity == "notice"
    assert rating.accuracy is not None and rating.accuracy.alf == 20.0
    assert rating.accuracy.rated_burden_ohm(1.0) is None
    for case in ("ground_fault", "phase_fault"):
        result = rating.cases[case]
        assert result is not None
        assert result.vx_available_v is None
        assert result.c37_110_index is None
        assert result.alf_effective is None
    assert not [f for f in rating.findings if f.code in (fc.ACCURACY_EXCEEDED, fc.SATURATION_RISK)]


@pytest.mark.parametrize(
    "extra", [{"rated_burden_va": 30}, {"accuracy": "30VA 5P20"}], ids=["field", "in-text"]
)
def test_p_class_with_rated_output_has_its_figures(extra):
    # 30 VA at 1 A: R_b,rated = S_n / I_n² = 30 Ω; E_al = ALF · I_n · (R_ct + R_b,rated)
    # = 20 · 1 · (2.5 + 30) = 650 V; ALF' = ALF · (R_ct + R_b,rated) / (R_ct + R_b)
    # = 20 · 32.5 / 62.5 = 10.4 at 60 Ω (IEC 61869-2, S10; formulas from memory).
    rating = evaluate_ct(SiteIndex(site_doc(extra)), "F1-A", BURDENS)
    assert not [f for f in rating.findings if f.code == fc.MISSING_DATA]
    result = rating.cases["ground_fault"]
    assert result is not None
    assert result.vx_available_v == pytest.approx(650.0)
    (exceeded,) = [f for f in rating.findings if f.code == fc.ACCURACY_EXCEEDED]
    assert exceeded.numbers["alf_effective"] == pytest.approx(10.4)
