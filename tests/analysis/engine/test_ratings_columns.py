"""The ratings as columns give what one CT at a time gives, to the last bit (issue 15).

Outside references: Python's own float formatting (``float(f"{x:.4g}")``, correctly rounded
decimal conversion) for the column rounding; ``math.log``/scalar IEEE arithmetic of
:func:`time_to_saturate_s` for the column time to saturate; the one-curve knee search for the
batch. The site-level equalities check that one CT and a whole site are rated alike.
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from analysis.engine import findings as fc
from analysis.engine.ratings import (
    CASES,
    SiteIndex,
    build_ct_report,
    evaluate_ct,
    excitation_curve,
    knee_point_iec,
    saturation_findings,
    site_ratings,
    site_static_findings,
)
from analysis.engine.ratings.excitation import clear_caches, knee_points_iec
from analysis.engine.ratings.rounding import (
    rounded,
    rounded_array,
    rounded_text,
    text_columns,
)
from analysis.engine.ratings.saturation import time_to_saturate_s, times_to_saturate_s
from tests.analysis.engine.test_ratings_checks import BURDENS, FEEDS, site_doc

finite = st.floats(allow_nan=False, allow_infinity=False, width=64)
awkward = st.sampled_from(
    [0.0, -0.0, math.nan, math.inf, -math.inf, 6.0625, 2.5, 9999.5, 99995.0, 1e22, 1e-23, 5e-324]
)


@given(st.lists(finite | awkward, max_size=60), st.integers(2, 6))
def test_column_rounding_is_pythons_own(values, digits):
    # Reference: Python's float formatting, value by value (ties to even on the exact binary
    # value, integral results as int).
    got = rounded_array(np.array(values, dtype=np.float64), digits)
    want = [rounded(v, digits) for v in values]
    assert [(type(g), repr(g)) for g in got] == [(type(w), repr(w)) for w in want]


@given(st.lists(finite | awkward, min_size=1, max_size=40), st.lists(st.integers(2, 4), min_size=1))
def test_column_texts_are_pythons_own(values, digits):
    columns = [(np.array(values, dtype=np.float64), d) for d in digits]
    got = text_columns(columns)
    assert got == [[rounded_text(v, d) for v in values] for d in digits]


def test_ties_and_powers_of_ten_round_as_python_does():
    # Exact ties go to even on the exact binary value (6.0625 → 6.062, 6.1875 → 6.188), as
    # Python's formatting does; exact powers of ten and values next to them keep their figures.
    # Near ties: 0.10005 is stored a little above 0.10005 (→ 0.1001) although 0.10005 × 10^4
    # computes to exactly 1000.5, which would round to even (1000).
    values = [6.0625, 6.1875, 0.5, 2.5, 1000.0, 999.9999999999999, 1e-5, 123456.5, 0.15625]
    values += [0.10005, 0.010005, 0.00010075, 101.45]
    got = rounded_array(np.array(values), 4)
    assert [(type(g), g) for g in got] == [(type(rounded(v, 4)), rounded(v, 4)) for v in values]
    assert got[:2] == [6.062, 6.188]
    assert got[-4:] == [float(f"{v:.4g}") for v in values[-4:]]


@given(
    st.floats(0.0, 60.0),
    st.floats(1.0, 500.0),
    st.floats(0.01, 10.0),
    st.floats(-2.0, 5.0),
    st.floats(1.0, 3000.0),
)
def test_column_time_to_saturate_is_the_one_value_form(x_over_r, i_f, r, x, v_x):
    # Reference: time_to_saturate_s evaluated on its own (plain floats and math.log).
    z = complex(r, x)
    one = time_to_saturate_s(
        x_over_r=x_over_r, saturation_emf_v=v_x, secondary_fault_a=i_f, total_burden_ohm=z
    )
    (col,) = times_to_saturate_s(
        x_over_r=np.array([x_over_r]),
        saturation_emf_v=np.array([v_x]),
        secondary_fault_a=np.array([i_f]),
        total_r_ohm=np.array([r]),
        total_x_ohm=np.array([x]),
    ).tolist()
    assert (one is None and math.isnan(col)) or one == col
    if one is not None and one > 0:
        # The flux envelope of the module docstring reaches K_s exactly at t_s.
        z_abs = abs(z)
        t1 = x_over_r / (2 * math.pi * 60)
        a, b = x_over_r * r / z_abs, max(x, 0.0) / z_abs
        e = math.exp(-one / t1)
        assert 1 + a * (1 - e) + b * e == pytest.approx(v_x / (i_f * z_abs), rel=1e-9)


def _curves():
    rng = np.random.default_rng(3)
    out = []
    for n in (3, 5, 8, 12):
        for _ in range(4):
            i = np.cumsum(rng.uniform(0.01, 1.0, n)) * 0.01
            x = i / i[n // 2]
            v = 100 * x**1.5 / (1 + x**4) ** 0.36
            out.append(excitation_curve(np.column_stack([i, np.maximum.accumulate(v) + i])))
    return out


def test_iec_knees_in_one_batch_equal_one_by_one():
    curves = _curves()
    clear_caches()
    one_by_one = []
    for c in curves:
        clear_caches()
        one_by_one.append(knee_point_iec(c))
    clear_caches()
    assert knee_points_iec(curves) == one_by_one
    assert any(k is not None for k in one_by_one)


def _odd_site() -> dict:
    """site_doc() with the data a site can lack or get wrong, one CT at a time."""
    doc = copy.deepcopy(site_doc())
    doc["cts"][0]["accuracy"] = "5P20"  # IEC P without a rated output
    doc["cts"][1].pop("winding_ohm")
    doc["cts"][2]["in_use"] = ["X1", "X9"]  # a terminal the CT does not have
    doc["buses"][0].pop("ground_fault_ka")
    return doc


@pytest.mark.parametrize("make", [site_doc, _odd_site])
def test_a_site_in_columns_equals_each_ct_on_its_own(make):
    doc = make()
    both = site_ratings(doc, burdens=BURDENS, feeds=FEEDS)
    assert both.findings == site_static_findings(doc, burdens=BURDENS, feeds=FEEDS)
    fed: dict[str, list[str]] = {}
    for device, cts in FEEDS.items():
        for ct in cts:
            fed.setdefault(ct, []).append(device)
    index = SiteIndex(doc)
    for ct in index.cts:
        one = build_ct_report(doc, ct, burdens=BURDENS.get(ct, {}), devices_fed=fed.get(ct, []))
        assert both.reports[ct] == one
        rating = evaluate_ct(index, ct, BURDENS.get(ct))
        own = [f.to_json() for f in rating.findings]
        assert both.reports[ct]["findings"][: len(own)] == own


def test_case_findings_come_case_by_case():
    # A CT whose ground-fault case saturates and whose phase-fault case cannot be assessed:
    # the findings read ground fault first, as saturation_findings gives them case by case.
    doc = copy.deepcopy(site_doc())
    doc["buses"][0].pop("three_phase_fault_ka")
    doc["buses"][0].update(ground_fault_ka=40.0)
    rating = evaluate_ct(SiteIndex(doc), "CB-1-A", BURDENS["CB-1-A"])
    by_case = [
        f
        for case in CASES
        for f in saturation_findings(ct="CB-1-A", tap=rating.tap, result=rating.cases[case])
    ]
    assert [f.code for f in by_case] == [fc.SATURATION_RISK, fc.MISSING_DATA]
    saturation = [f for f in rating.findings if f in by_case]
    assert saturation == by_case
