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

import bisect
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


def _sign(v: float) -> float:
    """``np.sign`` of a float: -1, 0 or 1, NaN for NaN."""
    if v > 0:
        return 1.0
    if v < 0:
        return -1.0
    return v if v != v else 0.0


class Pchip:
    """Monotone piecewise-cubic Hermite interpolant (Fritsch-Carlson derivatives, scipy's
    ``PchipInterpolator`` rule), no extrapolation: NaN outside [x0, xn].

    Built and evaluated at one point with plain floats (a curve has a handful of points, and
    the knee searches evaluate it point by point: numpy's per-call overhead would dominate);
    evaluated over many points with numpy. Both do the same IEEE operations in the same order,
    so they give the same bits.
    """

    __slots__ = ("_a", "_b", "_c", "_d", "_h", "_m", "_x", "_y")

    def __init__(self, x: np.ndarray, y: np.ndarray) -> None:
        xs: list[float] = np.asarray(x, dtype=float).tolist()
        ys: list[float] = np.asarray(y, dtype=float).tolist()
        n = len(xs)
        h = [xs[i + 1] - xs[i] for i in range(n - 1)]
        m = [(ys[i + 1] - ys[i]) / h[i] for i in range(n - 1)]
        if n == 2:
            d = [m[0], m[0]]
        else:
            d = [0.0] * n
            for i in range(n - 2):
                m0, m1 = m[i], m[i + 1]
                if _sign(m1) != _sign(m0) or m1 == 0 or m0 == 0:
                    continue  # a flat or turning point: zero slope
                w1 = 2 * h[i + 1] + h[i]
                w2 = h[i + 1] + 2 * h[i]
                whmean = (w1 / m0 + w2 / m1) / (w1 + w2)
                d[i + 1] = 1.0 / whmean if whmean != 0 else math.copysign(math.inf, whmean)
            d[0] = self._edge(h[0], h[1], m[0], m[1])
            d[-1] = self._edge(h[-1], h[-2], m[-1], m[-2])
        self._x, self._y, self._h, self._m, self._d = xs, ys, h, m, d
        # Slope on interval k as a t² + b t + c, t in [0, 1].
        self._a = [-6 * m[k] + 3 * d[k] + 3 * d[k + 1] for k in range(n - 1)]
        self._b = [6 * m[k] - 4 * d[k] - 2 * d[k + 1] for k in range(n - 1)]
        self._c = d[:-1]

    @staticmethod
    def _edge(h0: float, h1: float, m0: float, m1: float) -> float:
        d = ((2 * h0 + h1) * m0 - h0 * m1) / (h0 + h1)
        if _sign(d) != _sign(m0):
            return 0.0
        if _sign(m0) != _sign(m1) and abs(d) > 3 * abs(m0):
            return 3 * m0
        return d

    def _locate(self, xq: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        x, h = np.array(self._x), np.array(self._h)
        k = np.searchsorted(x, xq, side="right") - 1
        k = np.minimum(np.maximum(k, 0), len(x) - 2)
        t = (xq - x[k]) / h[k]
        inside = (xq >= x[0]) & (xq <= x[-1])
        return k, t, inside

    def _interval(self, xq: float) -> tuple[int, float] | None:
        """The interval k of a point and its position t in it; None outside [x0, xn]."""
        xs = self._x
        if not xs[0] <= xq <= xs[-1]:
            return None
        k = min(max(bisect.bisect_right(xs, xq) - 1, 0), len(xs) - 2)
        return k, (xq - xs[k]) / self._h[k]

    def __call__(self, xq: np.ndarray | float) -> np.ndarray:
        xq = np.asarray(xq, dtype=float)
        out: np.ndarray = _evaluate_rows([self], xq.reshape(1, -1))[0].reshape(xq.shape)
        return out

    def at(self, xq: float) -> float:
        """The interpolant at one point (as :meth:`__call__`, with plain floats)."""
        found = self._interval(xq)
        if found is None:
            return math.nan
        k, t = found
        h, d0, d1 = self._h[k], self._d[k], self._d[k + 1]
        t2, t3 = t * t, t * t * t
        return (
            (2 * t3 - 3 * t2 + 1) * self._y[k]
            + (t3 - 2 * t2 + t) * h * d0
            + (-2 * t3 + 3 * t2) * self._y[k + 1]
            + (t3 - t2) * h * d1
        )

    def derivative(self, xq: np.ndarray | float) -> np.ndarray:
        xq = np.asarray(xq, dtype=float)
        k, t, inside = self._locate(xq)
        a, b, c = np.array(self._a), np.array(self._b), np.array(self._c)
        val = (a[k] * t + b[k]) * t + c[k]
        return np.where(inside, val, np.nan)

    def derivative_at(self, xq: float) -> float:
        """The slope at one point (as :meth:`derivative`, with plain floats)."""
        found = self._interval(xq)
        if found is None:
            return math.nan
        k, t = found
        return (self._a[k] * t + self._b[k]) * t + self._c[k]

    def slope_crossings(self, level: float) -> list[tuple[float, float]]:
        """Points (x, slope change sign) where the slope passes through ``level``, in order."""
        out: list[tuple[float, float]] = []
        last = len(self._h) - 1
        for k in range(last + 1):
            ak, bk, ck = self._a[k], self._b[k], self._c[k] - level
            if abs(ak) < 1e-12:
                roots = [] if abs(bk) < 1e-12 else [-ck / bk]
            else:
                disc = bk * bk - 4 * ak * ck
                if disc < 0:
                    continue
                sq = math.sqrt(disc)
                roots = sorted({(-bk - sq) / (2 * ak), (-bk + sq) / (2 * ak)})
            for t in roots:
                if 0.0 <= t < 1.0 or (k == last and t == 1.0):
                    out.append((self._x[k] + t * self._h[k], 2 * ak * t + bk))
        return out

    def max_slope_x(self) -> float:
        """Where the slope is largest (nodes or an interior vertex of a slope parabola); the
        first such point, NaN slopes counting as largest (``np.argmax``'s rule)."""
        xs = list(self._x)
        for k in range(len(self._h)):
            ak = self._a[k]
            if ak < 0:
                t = -self._b[k] / (2 * ak)
                if 0 < t < 1:
                    xs.append(self._x[k] + t * self._h[k])
        best, best_slope = 0, math.nan
        for i, xq in enumerate(xs):
            slope = self.derivative_at(xq)
            if slope != slope:
                return xq
            if i == 0 or slope > best_slope:
                best, best_slope = i, slope
        return xs[best]


def _evaluate_rows(interpolants: Sequence[Pchip], xq: np.ndarray) -> np.ndarray:
    """Row r of ``xq`` evaluated on ``interpolants[r]``: every row in the same numpy
    operations (the interval of each point found row by row; the cubic for all at once)."""
    sizes_list = [len(p._x) for p in interpolants]
    sizes = np.array(sizes_list)
    offsets_list = list(itertools.accumulate(sizes_list, initial=0))[:-1]
    offsets = np.array(offsets_list)
    x = np.array([v for p in interpolants for v in p._x])
    y = np.array([v for p in interpolants for v in p._y])
    d = np.array([v for p in interpolants for v in p._d])
    h = np.array([v for p in interpolants for v in (*p._h, 0.0)])  # aligned with x
    k = np.empty(xq.shape, dtype=np.intp)
    for r, (start, size) in enumerate(zip(offsets_list, sizes_list, strict=True)):
        k[r] = np.searchsorted(x[start : start + size], xq[r], side="right")
    k -= 1
    k = np.minimum(np.maximum(k, 0), (sizes - 2)[:, None]) + offsets[:, None]
    first, last = x[offsets][:, None], x[offsets + sizes - 1][:, None]
    outside = ~((xq >= first) & (xq <= last))
    k1 = k + 1
    hk = h.take(k)
    t = xq - x.take(k)
    t /= hk
    t2 = t * t
    t3 = t2 * t  # t * t * t, evaluated left to right
    # (2 t³ - 3 t² + 1) y_k + (t³ - 2 t² + t) h d_k + (-2 t³ + 3 t²) y_k+1 + (t³ - t²) h d_k+1,
    # each operation as that expression does it, in the same order, into fewer temporaries
    val: np.ndarray = 2 * t3
    val -= 3 * t2
    val += 1
    val *= y.take(k)
    term = t3 - 2 * t2
    term += t
    term *= hk
    term *= d.take(k)
    val += term
    np.multiply(-2, t3, out=term)
    term += 3 * t2
    term *= y.take(k1)
    val += term
    np.subtract(t3, t2, out=term)
    term *= hk
    term *= d.take(k1)
    val += term
    if outside.any():
        val[outside] = np.nan
    return val


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
    return math.exp(_log_v_of_log_i(curve).at(math.log(current_a)))


def current_at(curve: ExcitationCurve, voltage_v: float) -> float | None:
    """Exciting current at an e.m.f., interpolated on log-log; None outside the measured range."""
    if not curve.voltage_v[0] <= voltage_v <= curve.voltage_v[-1]:
        return None
    return math.exp(_log_i_of_log_v(curve).at(math.log(voltage_v)))


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
            return KneePoint(voltage_v=math.exp(f.at(xk)), current_a=math.exp(xk))
    return None


def knee_point_iec(curve: ExcitationCurve) -> KneePoint | None:
    """IEC knee-point e.m.f. (S10): the lowest E with I(1.1 E) = 1.5 I(E), on log-log.

    None when no such e.m.f. lies inside the measured range. :func:`knee_points_iec` for one
    curve.
    """
    return knee_points_iec([curve])[0]


_IEC_KNEES: dict[ExcitationCurve, KneePoint | None] = {}
_MEMO_SIZE = 4096


def knee_points_iec(curves: Sequence[ExcitationCurve]) -> list[KneePoint | None]:
    """:func:`knee_point_iec` of each curve, each distinct curve worked out once (and kept);
    the grid searches of the curves not yet known run in one numpy batch.

    The e.m.f. axis (log V) is scanned on a grid of 1000 points for the first cell where
    h(y) = ln I(y + ln 1.1) - ln I(y) - ln 1.5 turns from negative to non-negative, and the
    root refined inside that cell by regula falsi.
    """
    new = [c for c in dict.fromkeys(curves) if c not in _IEC_KNEES]
    if new:
        if len(_IEC_KNEES) + len(new) > _MEMO_SIZE:
            _IEC_KNEES.clear()
        _IEC_KNEES.update(zip(new, _iec_knees(new), strict=True))
    return [_IEC_KNEES[c] for c in curves]


def _iec_knees(curves: Sequence[ExcitationCurve]) -> list[KneePoint | None]:
    step = math.log(IEC_EMF_STEP)
    target = math.log(IEC_CURRENT_STEP)
    out: list[KneePoint | None] = [None] * len(curves)
    rows: list[int] = []
    ends: list[tuple[float, float]] = []
    for j, curve in enumerate(curves):
        y0 = math.log(curve.voltage_v[0])
        y1 = math.log(curve.voltage_v[-1]) - step
        if y1 > y0:
            rows.append(j)
            ends.append((y0, y1))
    if not rows:
        return out
    interpolants = [_log_i_of_log_v(curves[j]) for j in rows]
    first, last = (np.array(v) for v in zip(*ends, strict=True))
    # np.linspace(y0, y1, _GRID) of every row: arange · ((y1 - y0) / (_GRID - 1)) + y0, the
    # last point y1 (numpy's own steps; a zero step, which it treats apart, cannot occur for
    # y1 > y0 of logarithms).
    y = np.arange(_GRID, dtype=float)[None, :] * ((last - first) / (_GRID - 1))[:, None]
    y += first[:, None]
    y[:, -1] = last
    ys = np.minimum(y, last[:, None])  # keep y + step inside the curve despite rounding
    both = _evaluate_rows(interpolants, np.concatenate((ys + step, ys), axis=1))
    hv = both[:, :_GRID] - both[:, _GRID:] - target
    up = (hv[:, :-1] < 0) & (hv[:, 1:] >= 0)
    found = up.any(axis=1)
    cells = up.argmax(axis=1)
    for r, j in enumerate(rows):
        if not found[r]:
            continue
        k = int(cells[r])
        out[j] = _refine_iec(
            interpolants[r],
            float(y[r, k]),
            float(y[r, k + 1]),
            float(hv[r, k]),
            float(hv[r, k + 1]),
            ends[r][1],
            step,
            target,
        )
    return out


def _refine_iec(
    g: Pchip,
    lo: float,
    hi: float,
    h_lo: float,
    h_hi: float,
    y1: float,
    step: float,
    target: float,
) -> KneePoint:
    """The IEC knee inside one grid cell [lo, hi] where h turns non-negative."""

    def h(y: float) -> float:
        y = y if y <= y1 else y1  # keep y + step inside the curve despite rounding
        return g.at(y + step) - g.at(y) - target

    mid = lo
    for _ in range(8):  # regula falsi with bisection fallback, inside one small grid cell
        mid = lo - h_lo * (hi - lo) / (h_hi - h_lo) if h_hi != h_lo else 0.5 * (lo + hi)
        if not lo < mid < hi:
            mid = 0.5 * (lo + hi)
        h_mid = h(mid)
        if abs(h_mid) < 1e-12 or hi - lo < 1e-12:
            break
        if h_mid < 0:
            lo, h_lo = mid, h_mid
        else:
            hi, h_hi = mid, h_mid
    return KneePoint(voltage_v=math.exp(mid), current_a=math.exp(g.at(mid)))


def clear_caches() -> None:
    """Forget the interpolants and knee points worked out so far (benchmarks, tests)."""
    for memo in (_log_v_of_log_i, _log_i_of_log_v, knee_point_ieee):
        memo.cache_clear()
    _IEC_KNEES.clear()


def operating_point(curve: ExcitationCurve, emf_v: float) -> tuple[float, float | None]:
    """(e.m.f. V, exciting current A) the CT must reach to supply ``emf_v``, e.g. the fault
    current into the total burden; the current is None outside the measured range."""
    return float(emf_v), current_at(curve, emf_v)
