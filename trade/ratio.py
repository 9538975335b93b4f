"""CT ratios as the trade writes them: ``400:5``, ``1000:1``, ``300/5``."""

from __future__ import annotations

import functools
import re

# Rated secondary currents the record holds: 5 A (the IEEE C57.13 value) and 1 A (the usual
# IEC 61869-2 value for long leads); others are refused (design.md).
SECONDARY_RATINGS_A: tuple[float, ...] = (1.0, 5.0)

_RATIO_RE = re.compile(
    r"^\s*(\d+(?:\.\d+)?)\s*a?\s*[:/]\s*(\d+(?:\.\d+)?)\s*a?\s*$", flags=re.IGNORECASE
)
# A relay's ratio setting: N:5 or N:1 (N/5 accepted), nothing else.
_SETTING_RE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*[:/]\s*(1|5)\s*$")


def format_ratio(primary_a: float, secondary_a: float) -> str:
    """``400:5`` (integers without a decimal point)."""
    return f"{primary_a:g}:{secondary_a:g}"


@functools.lru_cache(maxsize=4096)
def parse_ratio(text: str) -> tuple[float, float]:
    """(primary A, secondary A) from ``"300:5"``, ``"300/5"``, ``"300 : 5 A"`` or ``"80:1"``."""
    m = _RATIO_RE.match(str(text))
    if not m:
        raise ValueError(f"not a ratio {text!r}: expected primary:secondary such as '300:5'")
    primary, secondary = float(m.group(1)), float(m.group(2))
    if primary <= 0 or secondary <= 0:
        raise ValueError(f"ratio {text!r}: both sides must be positive")
    return primary, secondary


def ratio_value(ratio: str | tuple[float, float] | float) -> float:
    """A ratio as one number (primary / secondary): ``"400:5"`` and ``"80:1"`` are both 80."""
    if isinstance(ratio, (int, float)):
        return float(ratio)
    primary, secondary = parse_ratio(ratio) if isinstance(ratio, str) else ratio
    return float(primary) / float(secondary)


def ratios_equal(
    a: str | tuple[float, float] | float, b: str | tuple[float, float] | float
) -> bool:
    """Whether two ratios are the same number (relative tolerance 1e-9)."""
    va, vb = ratio_value(a), ratio_value(b)
    return abs(va - vb) <= 1e-9 * max(abs(va), abs(vb))


def ratio_setting_error(text: object) -> str | None:
    """None when ``text`` is a device ratio setting, ``N:5`` or ``N:1`` (``N/5`` accepted) with
    N > 0; else what is wrong with it."""
    m = _SETTING_RE.match(text) if isinstance(text, str) else None
    if m is None:
        return f"ratio setting must look like '400:5' or '1000:1', got {text!r}"
    if float(m.group(1)) <= 0:
        return f"ratio setting must have a positive primary current, got {text!r}"
    return None
