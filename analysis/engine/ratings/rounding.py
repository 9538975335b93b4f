"""Numbers rounded to significant figures for people: the CT report's values and the figures
quoted in findings' messages.

The rule is Python's own: ``float(f"{x:.{digits}g}")``, i.e. the decimal of ``digits``
significant figures nearest to the exact binary value of ``x`` (ties to even), read back as
the nearest double; integral results are shown as integers. :func:`rounded` does it for one
number, :func:`rounded_array` for a whole column at once with numpy and the same result, bit
for bit:

- the decimal mantissa ``M`` (``10^(digits-1) ≤ M < 10^digits``) is ``rint(|x| / 10^k)``;
  that quotient carries one rounding of at most half an ulp (10^|k| is exact for |k| ≤ 22), so
  wherever it lies farther than 1e-6 from a half-integer ``rint`` picks the decimal that exact
  arithmetic would pick;
- ``M · 10^k`` (or ``M / 10^-k``) is one correctly rounded operation on exact operands: the
  double nearest to the decimal, which is what reading the decimal text back gives.

Values near a tie, outside the exact powers of ten, or whose exponent estimate misses are
rounded one by one with :func:`rounded` (a handful in a fleet).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import numpy.typing as npt

_EXACT_POWERS = 22  # 10^0 .. 10^22 are exact doubles
_POW10 = np.array([float(f"1e{p}") for p in range(_EXACT_POWERS + 1)])
_TIE_BAND = 1e-6
_INT_EXACT = 2.0**53

Rounded = float | int | None


def rounded(x: float | None, digits: int) -> Rounded:
    """``x`` to ``digits`` significant figures (None for None, NaN and infinities); an integral
    result as an ``int``."""
    if x is None or not math.isfinite(x):
        return None
    value = float(f"{x:.{digits}g}")
    return int(value) if value.is_integer() else value


def rounded_text(x: float | None, digits: int = 4) -> str:
    """``x`` to ``digits`` significant figures for a message, never in exponent form: ``"?"``
    for None, ``inf``/``nan`` as such."""
    if x is None:
        return "?"
    if not math.isfinite(x):
        return f"{x:g}"
    value = float(f"{x:.{digits}g}")
    return f"{value:.0f}" if value.is_integer() else f"{value:g}"


def rounded_array(
    values: npt.NDArray[np.float64], digits: int | npt.NDArray[np.int64]
) -> list[Rounded]:
    """:func:`rounded` of every element (NaN stands for None), as a list of Python numbers;
    ``digits`` for all elements or one per element."""
    x = np.asarray(values, dtype=np.float64)
    if not len(x):
        return []
    ax = np.abs(x)
    with np.errstate(all="ignore"):  # NaN, infinities and zeros go the one-by-one way
        k = np.floor(np.log10(ax)) - (np.asarray(digits) - 1)
        k = np.where(np.isfinite(k), k, 0.0)
        p = np.abs(k).astype(np.intp)
        exact = p <= _EXACT_POWERS
        scale = _POW10[np.minimum(p, _EXACT_POWERS)]
        up = k >= 0
        mantissa = np.where(up, ax / scale, ax * scale)
        m = np.rint(mantissa)
        value = np.where(up, m * scale, m / scale)
        low = _POW10[np.asarray(digits) - 1]
        fine = (
            np.isfinite(x)
            & (ax > 0)
            & exact
            & (mantissa >= low)
            & (mantissa < low * 10.0)
            & (np.abs(mantissa - np.floor(mantissa) - 0.5) > _TIE_BAND)
        )
    value = np.copysign(value, x)
    whole = np.floor(value) == value
    integral = fine & whole & (np.abs(value) < _INT_EXACT)
    none = ~np.isfinite(x)
    zero = x == 0
    slow = ~(fine | none | zero) | (fine & whole & ~integral)
    obj = value.astype(object)
    obj[integral] = value[integral].astype(np.int64).astype(object)
    obj[none] = None
    obj[zero] = 0
    out: list[Rounded] = obj.tolist()
    for i in np.flatnonzero(slow).tolist():
        d = digits if isinstance(digits, int) else int(digits[i])
        out[i] = rounded(float(x[i]), d)
    return out


Column = tuple[npt.NDArray[np.float64], int]  # values and their significant digits


def _flat(columns: Sequence[Column]) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.int64]]:
    values = np.concatenate([c for c, _ in columns])
    digits = np.concatenate([np.full(len(c), d, dtype=np.int64) for c, d in columns])
    return values, digits


def _split(flat: list[Any], columns: Sequence[Column]) -> list[list[Any]]:
    out, start = [], 0
    for c, _ in columns:
        out.append(flat[start : start + len(c)])
        start += len(c)
    return out


def rounded_columns(columns: Sequence[Column]) -> list[list[Rounded]]:
    """:func:`rounded_array` of several columns (each with its digits) in one pass."""
    if not columns:
        return []
    values, digits = _flat(columns)
    return _split(rounded_array(values, digits), columns)


def text_columns(columns: Sequence[Column]) -> list[list[str]]:
    """:func:`rounded_text` of every element of several columns (each with its digits) in one
    pass (NaN gives ``"nan"``), the rounding done as :func:`rounded_array` does it; each
    distinct figure written once."""
    if not columns:
        return []
    values, digits = _flat(columns)
    texts = np.empty(len(values), dtype=object)
    zero = values == 0
    for d in np.unique(digits[~zero]).tolist():
        rows = np.flatnonzero((digits == d) & ~zero)
        distinct, where = np.unique(values[rows], return_inverse=True)
        written = np.array(_texts(distinct, d), dtype=object)
        texts[rows] = written[where]
    for i in np.flatnonzero(zero).tolist():
        texts[i] = rounded_text(float(values[i]), int(digits[i]))  # keeps the sign of -0
    return _split(texts.tolist(), columns)


def _texts(values: npt.NDArray[np.float64], digits: int) -> list[str]:
    out: list[str] = []
    for v, r in zip(values.tolist(), rounded_array(values, digits), strict=True):
        if r is None:
            out.append(f"{v:g}")  # NaN and infinities
        elif type(r) is int:
            out.append(str(r))
        else:
            out.append(f"{r:g}")
    return out
