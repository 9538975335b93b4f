"""Knee points on synthetic excitation curves whose knees are known in closed form.

IEEE knee (S9): where d(log V)/d(log I) = 1. IEC knee (S10): I(1.1 E) = 1.5 I(E).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from analysis.engine.ratings import (
    current_at,
    excitation_curve,
    knee_point_iec,
    knee_point_ieee,
    operating_point,
    scale_to_tap,
    voltage_at,
)

# Smooth curve: ln V = a + s0 x - (s0 - s1) ln(1 + e^(k (x - x0))) / k with x = ln I.
# Its log-log slope s0 - (s0 - s1) σ(k (x - x0)) runs from s0 (steep, unsaturated) to s1
# (saturated); slope 1 where σ = (s0 - 1)/(s0 - s1), i.e. x = x0 + ln(p/(1-p))/k.
A, X0, S0, S1, K = math.log(1e4), math.log(0.05), 2.0, 0.1, 3.0


def smooth_v(i: float) -> float:
    x = math.log(i)
    return math.exp(A + S0 * x - (S0 - S1) * math.log1p(math.exp(K * (x - X0))) / K)


def smooth_curve(n: int = 25):
    return excitation_curve([[i, smooth_v(i)] for i in np.geomspace(1e-3, 10, n)])


def test_ieee_knee_of_smooth_curve():
    p = (S0 - 1) / (S0 - S1)
    i_knee = math.exp(X0 + math.log(p / (1 - p)) / K)
    knee = knee_point_ieee(smooth_curve())
    assert knee.current_a == pytest.approx(i_knee, rel=0.01)
    assert knee.voltage_v == pytest.approx(smooth_v(i_knee), rel=0.005)


def test_iec_knee_of_smooth_curve():
    # Exact IEC knee of the analytic curve: root of ln V(1.5 I) - ln V(I) = ln 1.1.
    def h(x):
        return (
            math.log(smooth_v(math.exp(x) * 1.5)) - math.log(smooth_v(math.exp(x))) - math.log(1.1)
        )

    x = brentq(h, math.log(1e-3), math.log(5))
    knee = knee_point_iec(smooth_curve())
    assert knee.voltage_v == pytest.approx(smooth_v(math.exp(x)), rel=0.005)
    assert knee.current_a == pytest.approx(math.exp(x), rel=0.02)


def test_iec_knee_of_two_power_laws():
    # V = V_b (I/I_b)^2 below I_b, V_b (I/I_b)^0.1 above. With E = V_b / r (1 < r < 1.1):
    # I(E) = I_b r^(-1/2), I(1.1 E) = I_b (1.1/r)^10, so 1.5 = (1.1/r)^10 r^(1/2) →
    # ln r = (10 ln 1.1 - ln 1.5) / 9.5.
    i_b, v_b = 0.05, 200.0

    def v(i):
        return v_b * (i / i_b) ** (2.0 if i < i_b else 0.1)

    pts = np.concatenate([np.geomspace(1e-3, i_b, 33), np.geomspace(i_b, 10, 33)[1:]])
    knee = knee_point_iec(excitation_curve([[i, v(i)] for i in pts]))
    expected = v_b / math.exp((10 * math.log(1.1) - math.log(1.5)) / 9.5)
    assert knee.voltage_v == pytest.approx(expected, rel=0.005)


def test_iec_knee_above_ieee_knee_on_a_smooth_core():
    # Common practice, no source: the IEC knee e.m.f. lies above the IEEE 45° knee.
    c = smooth_curve()
    assert knee_point_iec(c).voltage_v > knee_point_ieee(c).voltage_v


def test_no_knee_inside_the_range():
    # A pure power law of slope 2 never reaches slope 1 or the 10 %/50 % condition.
    c = excitation_curve([[i, 100 * i**2] for i in (0.01, 0.02, 0.05, 0.1)])
    assert knee_point_ieee(c) is None
    assert knee_point_iec(c) is None
    assert knee_point_ieee(excitation_curve([[0.01, 10], [0.1, 50]])) is None


def test_scale_to_tap():
    # S5, S6: volts × N_tap/N_full, current × N_full/N_tap.
    c = smooth_curve(9)
    t = scale_to_tap(c, 0.5)
    assert t.voltage_v == pytest.approx([v / 2 for v in c.voltage_v])
    assert t.current_a == pytest.approx([i * 2 for i in c.current_a])
    assert knee_point_ieee(t).voltage_v == pytest.approx(knee_point_ieee(c).voltage_v / 2)
    assert knee_point_iec(t).voltage_v == pytest.approx(knee_point_iec(c).voltage_v / 2)
    with pytest.raises(ValueError):
        scale_to_tap(c, 0)


def test_interpolation_passes_through_points_and_stays_inside_range():
    pts = [[0.005, 20], [0.02, 120], [0.06, 300]]
    c = excitation_curve(pts)
    for i, v in pts:
        assert voltage_at(c, i) == pytest.approx(v)
        assert current_at(c, v) == pytest.approx(i)
    assert 20 < voltage_at(c, 0.01) < 120
    assert voltage_at(c, 1.0) is None and current_at(c, 10.0) is None
    assert operating_point(c, 60.0)[1] == pytest.approx(current_at(c, 60.0))
    assert operating_point(c, 1000.0) == (1000.0, None)


@pytest.mark.parametrize(
    "points",
    [
        [[0.01, 10]],
        [[0.01, 10], [0.02, 5]],
        [[0.01, 10], [0.01, 20]],
        [[0, 10], [0.1, 20]],
        [[0.01, -1], [0.1, 20]],
    ],
)
def test_bad_curves(points):
    with pytest.raises(ValueError, match="excitation"):
        excitation_curve(points)


@pytest.mark.parametrize("seed", range(20))
def test_pchip_matches_scipy(seed):
    # Oracle: scipy.interpolate.PchipInterpolator (same Fritsch-Carlson derivative rule).
    from scipy.interpolate import PchipInterpolator

    from analysis.engine.ratings.excitation import Pchip

    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 30))
    x = np.cumsum(rng.uniform(0.05, 1.0, n))
    y = np.cumsum(rng.uniform(0.0, 2.0, n)) * rng.choice([1.0, -1.0])
    if seed % 4 == 0:
        y = rng.normal(size=n)  # non-monotone data too
    ours, ref = Pchip(x, y), PchipInterpolator(x, y, extrapolate=False)
    xq = np.linspace(x[0], x[-1], 501)
    np.testing.assert_allclose(ours(xq), ref(xq), rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(ours.derivative(xq), ref.derivative()(xq), rtol=1e-9, atol=1e-9)
    assert np.isnan(ours(x[0] - 0.1)) and np.isnan(ours(x[-1] + 0.1))


def test_ieee_knee_is_a_true_tangent_point():
    # At the IEEE knee the scipy interpolant's slope is exactly 1 (oracle check of the
    # closed-form root).
    from scipy.interpolate import PchipInterpolator

    c = smooth_curve(12)
    knee = knee_point_ieee(c)
    ref = PchipInterpolator(np.log(c.current_a), np.log(c.voltage_v))
    assert ref.derivative()(math.log(knee.current_a)) == pytest.approx(1.0, abs=1e-9)
    assert math.exp(ref(math.log(knee.current_a))) == pytest.approx(knee.voltage_v, rel=1e-9)


def test_iec_knee_satisfies_its_definition_on_the_interpolant():
    from scipy.interpolate import PchipInterpolator

    c = smooth_curve(12)
    knee = knee_point_iec(c)
    inv = PchipInterpolator(np.log(c.voltage_v), np.log(c.current_a))
    ratio = math.exp(inv(math.log(knee.voltage_v * 1.1)) - inv(math.log(knee.voltage_v)))
    assert ratio == pytest.approx(1.5, rel=1e-8)
