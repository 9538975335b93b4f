"""Excitation curves: scaling to the tap in use, knee points and the operating point.

A curve is measured on the full winding as (exciting current A, secondary r.m.s. volts) pairs.
All interpolation is on log-log axes with a shape-preserving monotone cubic (PCHIP, Fritsch and
Carlson; the same derivative rule as ``scipy.interpolate.PchipInterpolator``, against which the
tests check it) through the measured points, so the slope is continuous (the IEEE definition
needs a tangent) and the curve never wiggles between points. It is written out here because the
fleet recompute evaluates thousands of curves and scipy's constructor dominated the time.

Knee points:

- IEEE (IEEE 3004.1 / C57.13 definition, S9): the point where the tangent to the log-log curve
  (equal decades) makes 45° with the current axis, i.e. d(log V)/d(log I) = 1 on the way from the
  steep unsaturated part into saturation (non-gapped cores; gapped cores use 30°, from memory).
- IEC (IEC 61869-2 knee-point e.m.f., S10): the e.m.f. at which a 10 % rise in e.m.f. raises the
  exciting current by 50 %: I(1.1 E_k) = 1.5 I(E_k).

At a tap with N_tap / N_full = f the same core flux gives f times the volts, and the same
ampere-turns of excitation f⁻¹ times the current (S5, S6).
"""

from __future__ import annotations

import functools
import itertools
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

IEEE_KNEE_SLOPE = 1.0  # tan 45°
IEC_EMF_STEP = 1.1
IEC_CURRENT_STEP = 1.5
_GRID = 1000


@dataclass(frozen=True, slots=True)
class ExcitationCurve:
    """Exciting current (A) against secondary e.m.f. (V), both strictly increasing."""

    current_a: tuple[float, ...]
    voltage_v: tuple[float, ...]

    def points(self) -> list[list[float]]:
        return [[i, v] for i, v in zip(self.current_a, self.voltage_v, strict=True)]


@dataclass(frozen=True, slots=True)
class KneePoint:
    """A knee point: e.m.f. (V) and exciting current (A) there."""

    voltage_v: float
    current_a: float


def excitation_curve(points: Iterable[Sequence[float]]) -> ExcitationCurve:
    """Validate ``[[I_A, V], ...]`` points into a curve (sorted by current).

    Raises ``ValueError`` when there are fewer than two points, a value is not positive, or the
    voltage does not rise with the current.
    """
    pairs = sorted((float(p[0]), float(p[1])) for p in points)
    if len(pairs) < 2:
        raise ValueError(f"an excitation curve needs at least two points, got {len(pairs)}")
    for i, v in pairs:
        if not (i > 0 and v > 0) or not (math.isfinite(i) and math.isfinite(v)):
            raise ValueError(f"excitation point [{i}, {v}]: current and voltage must be positive")
    for (i0, v0), (i1, v1) in itertools.pairwise(pairs):
        if i1 <= i0 or v1 <= v0:
            raise ValueError(
                f"excitation points [{i0}, {v0}] and [{i1}, {v1}]: current and voltage must both "
                "rise from point to point"
            )
    return ExcitationCurve(
        current_a=tuple(i for i, _ in pairs), voltage_v=tuple(v for _, v in pairs)
    )


def scale_to_tap(curve: ExcitationCurve, turns_fraction: float) -> ExcitationCurve:
    """The curve of the tap in use: volts × N_tap/N_full, amperes × N_full/N_tap (S5, S6)."""
    if not 0 < turns_fraction <= 1:
        raise ValueError(f"turns fraction must be in (0, 1], got {turns_fraction}")
    return ExcitationCurve(
        current_a=tuple(i / turns_fraction for i in curve.current_a),
        voltage_v=tuple(v * turns_fraction for v in curve.voltage_v),
    )


class Pchip:
    """Monotone piecewise-cubic Hermite interpolant (Fritsch-Carlson derivatives, scipy's
    ``PchipInterpolator`` rule), no extrapolation: NaN outside [x0, xn]."""

    __slots__ = ("d", "h", "m", "x", "y")

    def __init__(self, x: np.ndarray, y: np.ndarray) -> None:
        self.x, self.y = x, y
        self.h = h = np.diff(x)
        self.m = m = np.diff(y) / h
        d = np.empty_like(x)
        if len(x) == 2:
            d[:] = m[0]
        else:
            w1 = 2 * h[1:] + h[:-1]
            w2 = h[1:] + 2 * h[:-1]
            flat = (np.sign(m[1:]) != np.sign(m[:-1])) | (m[1:] == 0) | (m[:-1] == 0)
            with np.errstate(divide="ignore", invalid="ignore"):
                whmean = (w1 / m[:-1] + w2 / m[1:]) / (w1 + w2)
                d[1:-1] = np.where(flat, 0.0, 1.0 / whmean)
            d[0] = self._edge(h[0], h[1], m[0], m[1])
            d[-1] = self._edge(h[-1], h[-2], m[-1], m[-2])
        self.d = d

    @staticmethod
    def _edge(h0: float, h1: float, m0: float, m1: float) -> float:
        d = ((2 * h0 + h1) * m0 - h0 * m1) / (h0 + h1)
        if np.sign(d) != np.sign(m0):
            return 0.0
        if np.sign(m0) != np.sign(m1) and abs(d) > 3 * abs(m0):
            return 3 * m0
        return float(d)

    def _locate(self, xq: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        k = np.clip(np.searchsorted(self.x, xq, side="right") - 1, 0, len(self.x) - 2)
        t = (xq - self.x[k]) / self.h[k]
        inside = (xq >= self.x[0]) & (xq <= self.x[-1])
        return k, t, inside

    def __call__(self, xq: np.ndarray | float) -> np.ndarray:
        xq = np.asarray(xq, dtype=float)
        k, t, inside = self._locate(xq)
        h, d0, d1 = self.h[k], self.d[k], self.d[k + 1]
        t2, t3 = t * t, t * t * t
        val = (
            (2 * t3 - 3 * t2 + 1) * self.y[k]
            + (t3 - 2 * t2 + t) * h * d0
            + (-2 * t3 + 3 * t2) * self.y[k + 1]
            + (t3 - t2) * h * d1
        )
        return np.where(inside, val, np.nan)

    def derivative(self, xq: np.ndarray | float) -> np.ndarray:
        xq = np.asarray(xq, dtype=float)
        k, t, inside = self._locate(xq)
        a, b, c = self._slope_quadratic()
        val = (a[k] * t + b[k]) * t + c[k]
        return np.where(inside, val, np.nan)

    def _slope_quadratic(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Slope on interval k as a t² + b t + c, t in [0, 1]."""
        m, d0, d1 = self.m, self.d[:-1], self.d[1:]
        return -6 * m + 3 * d0 + 3 * d1, 6 * m - 4 * d0 - 2 * d1, d0

    def slope_crossings(self, level: float) -> list[tuple[float, float]]:
        """Points (x, slope change sign) where the slope passes through ``level``, in order."""
        a, b, c = self._slope_quadratic()
        out: list[tuple[float, float]] = []
        for k in range(len(self.h)):
            ak, bk, ck = float(a[k]), float(b[k]), float(c[k]) - level
            if abs(ak) < 1e-12:
                roots = [] if abs(bk) < 1e-12 else [-ck / bk]
            else:
                disc = bk * bk - 4 * ak * ck
                if disc < 0:
                    continue
                sq = math.sqrt(disc)
                roots = sorted({(-bk - sq) / (2 * ak), (-bk + sq) / (2 * ak)})
            for t in roots:
                if 0.0 <= t < 1.0 or (k == len(self.h) - 1 and t == 1.0):
                    out.append((float(self.x[k] + t * self.h[k]), 2 * ak * t + bk))
        return out

    def max_slope_x(self) -> float:
        """Where the slope is largest (nodes or an interior vertex of a slope parabola)."""
        a, b, _ = self._slope_quadratic()
        xs = list(self.x)
        for k in range(len(self.h)):
            if a[k] < 0:
                t = -b[k] / (2 * a[k])
                if 0 < t < 1:
                    xs.append(float(self.x[k] + t * self.h[k]))
        xs_arr = np.asarray(xs)
        return float(xs_arr[int(np.argmax(self.derivative(xs_arr)))])


def _logs(curve: ExcitationCurve) -> tuple[np.ndarray, np.ndarray]:
    return np.log(np.asarray(curve.current_a)), np.log(np.asarray(curve.voltage_v))


@functools.lru_cache(maxsize=4096)
def _log_v_of_log_i(curve: ExcitationCurve) -> Pchip:
    x, y = _logs(curve)
    return Pchip(x, y)


@functools.lru_cache(maxsize=4096)
def _log_i_of_log_v(curve: ExcitationCurve) -> Pchip:
    x, y = _logs(curve)
    return Pchip(y, x)


def voltage_at(curve: ExcitationCurve, current_a: float) -> float | None:
    """E.m.f. at an exciting current, interpolated on log-log; None outside the measured range."""
    if not curve.current_a[0] <= current_a <= curve.current_a[-1]:
        return None
    return float(math.exp(_log_v_of_log_i(curve)(math.log(current_a))))


def current_at(curve: ExcitationCurve, voltage_v: float) -> float | None:
    """Exciting current at an e.m.f., interpolated on log-log; None outside the measured range."""
    if not curve.voltage_v[0] <= voltage_v <= curve.voltage_v[-1]:
        return None
    return float(math.exp(_log_i_of_log_v(curve)(math.log(voltage_v))))


@functools.lru_cache(maxsize=4096)
def knee_point_ieee(curve: ExcitationCurve) -> KneePoint | None:
    """IEEE knee point (S9): where the log-log slope falls through 1 (45° tangent).

    Taken as the first downward crossing after the steepest part of the curve, solved in closed
    form on the cubic's quadratic slope; None when the measured points never reach slope 1 from
    above (the knee is outside the measured range).
    """
    if len(curve.current_a) < 3:
        return None
    f = _log_v_of_log_i(curve)
    x_steep = f.max_slope_x()
    for xk, turn in f.slope_crossings(IEEE_KNEE_SLOPE):
        if xk >= x_steep and turn < 0:
            return KneePoint(voltage_v=float(math.exp(f(xk))), current_a=float(math.exp(xk)))
    return None


@functools.lru_cache(maxsize=4096)
def knee_point_iec(curve: ExcitationCurve) -> KneePoint | None:
    """IEC knee-point e.m.f. (S10): the lowest E with I(1.1 E) = 1.5 I(E), on log-log.

    None when no such e.m.f. lies inside the measured range.
    """
    g = _log_i_of_log_v(curve)
    step = math.log(IEC_EMF_STEP)
    y0 = math.log(curve.voltage_v[0])
    y1 = math.log(curve.voltage_v[-1]) - step
    if y1 <= y0:
        return None
    target = math.log(IEC_CURRENT_STEP)

    def h(y: np.ndarray | float) -> np.ndarray:
        y = np.minimum(y, y1)  # keep y + step inside the curve despite rounding
        out: np.ndarray = g(y + step) - g(y) - target
        return out

    y = np.linspace(y0, y1, _GRID)
    hv = h(y)
    up = np.nonzero((hv[:-1] < 0) & (hv[1:] >= 0))[0]
    if len(up) == 0:
        return None
    k = int(up[0])
    lo, hi, h_lo, h_hi = float(y[k]), float(y[k + 1]), float(hv[k]), float(hv[k + 1])
    for _ in range(8):  # regula falsi with bisection fallback, inside one small grid cell
        mid = lo - h_lo * (hi - lo) / (h_hi - h_lo) if h_hi != h_lo else 0.5 * (lo + hi)
        if not lo < mid < hi:
            mid = 0.5 * (lo + hi)
        h_mid = float(h(mid))
        if abs(h_mid) < 1e-12 or hi - lo < 1e-12:
            break
        if h_mid < 0:
            lo, h_lo = mid, h_mid
        else:
            hi, h_hi = mid, h_mid
    return KneePoint(voltage_v=float(math.exp(mid)), current_a=float(math.exp(g(mid))))


def operating_point(curve: ExcitationCurve, emf_v: float) -> tuple[float, float | None]:
    """(e.m.f. V, exciting current A) the CT must reach to supply ``emf_v``, e.g. the fault
    current into the total burden; the current is None outside the measured range."""
    return float(emf_v), current_at(curve, emf_v)
