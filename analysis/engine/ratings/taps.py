"""Multi-ratio CT taps: ratio, turns and winding resistance of the tap in use.

A multi-ratio winding is described once by the cumulative primary ampere rating at each terminal
(design.md, "Terminal positions"; IEEE C57.13 multi-ratio tables as reproduced in S4). The ratio
of a terminal pair is ``|pos(a) - pos(b)| : secondary rating`` and the turns in use are
``|pos(a) - pos(b)| / secondary rating``. Duplicate ratios between different pairs are legal.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from itertools import combinations

from trade.ratio import SECONDARY_RATINGS_A, format_ratio

_TAP_RE = re.compile(r"^\s*([A-Za-z]*\d+)\s*(?:-|–|—|/|,|\s)\s*([A-Za-z]*\d+)\s*$")


@dataclass(frozen=True, slots=True)
class Tap:
    """The terminal pair in use on a CT and what follows from it."""

    terminals: tuple[str, str]
    primary_a: float
    secondary_a: float
    full_primary_a: float

    @property
    def turns(self) -> float:
        """Secondary turns in use (per primary turn): primary A of the tap / secondary A."""
        return self.primary_a / self.secondary_a

    @property
    def full_turns(self) -> float:
        return self.full_primary_a / self.secondary_a

    @property
    def turns_fraction(self) -> float:
        """N_tap / N_full: how much of the winding is in use."""
        return self.primary_a / self.full_primary_a

    @property
    def ratio(self) -> str:
        """The ratio as the trade writes it, e.g. ``"400:5"``."""
        return format_ratio(self.primary_a, self.secondary_a)

    @property
    def ratio_value(self) -> float:
        return self.primary_a / self.secondary_a


def parse_tap(tap: str | Iterable[str]) -> tuple[str, str]:
    """Terminal pair from ``"X2-X4"``, ``"X2 X4"``, ``"X2/X4"`` or ``["X2", "X4"]``."""
    if isinstance(tap, str):
        m = _TAP_RE.match(tap)
        if not m:
            raise ValueError(f"not a tap {tap!r}: expected two terminals such as 'X2-X4'")
        a, b = m.group(1), m.group(2)
    else:
        pair = [str(t).strip() for t in tap]
        if len(pair) != 2:
            raise ValueError(f"a tap is two terminals, got {len(pair)}: {pair!r}")
        a, b = pair
    a, b = a.upper(), b.upper()
    if a == b:
        raise ValueError(f"a tap needs two different terminals, got {a!r} twice")
    return a, b


def _positions(terminals: Mapping[str, float]) -> dict[str, float]:
    if len(terminals) < 2:
        raise ValueError(f"a CT needs at least two terminal positions, got {dict(terminals)!r}")
    return {str(k).upper(): float(v) for k, v in terminals.items()}


def full_primary_a(terminals: Mapping[str, float]) -> float:
    """Primary A of the full winding: the span of the terminal positions."""
    pos = _positions(terminals)
    return max(pos.values()) - min(pos.values())


def tap_of(terminals: Mapping[str, float], tap: str | Iterable[str], secondary_a: float) -> Tap:
    """The :class:`Tap` of a terminal pair on a winding given by cumulative positions."""
    pos = _positions(terminals)
    return _tap_of(tuple(sorted(pos.items())), parse_tap(tap), float(secondary_a))


@functools.lru_cache(maxsize=8192)
def _tap_of(
    pos_items: tuple[tuple[str, float], ...], pair: tuple[str, str], secondary_a: float
) -> Tap:
    if secondary_a not in SECONDARY_RATINGS_A:
        raise ValueError(f"secondary rating must be 1 or 5 A, got {secondary_a:g}")
    pos = dict(pos_items)
    a, b = pair
    for t in (a, b):
        if t not in pos:
            raise ValueError(f"terminal {t!r} is not on this CT; terminals: {', '.join(pos)}")
    primary = abs(pos[a] - pos[b])
    if primary <= 0:
        raise ValueError(f"terminals {a} and {b} are at the same position: no turns between them")
    return Tap(
        terminals=(a, b),
        primary_a=primary,
        secondary_a=secondary_a,
        full_primary_a=max(pos.values()) - min(pos.values()),
    )


def all_taps(terminals: Mapping[str, float], secondary_a: float) -> list[Tap]:
    """Every terminal pair of the winding, in terminal order (duplicate ratios included)."""
    pos = _positions(terminals)
    order = sorted(pos, key=lambda t: pos[t])
    return [tap_of(pos, (a, b), secondary_a) for a, b in combinations(order, 2) if pos[a] != pos[b]]


def winding_ohm_at_tap(winding_ohm_full: float, tap: Tap) -> float:
    """Secondary winding resistance of the tap in use, scaled by the turns in use.

    Assumes an even mean turn length over the winding (common practice, no source); a measured
    tap resistance, where one exists, is better.
    """
    return float(winding_ohm_full) * tap.turns_fraction


def ct_tap(ct: Mapping[str, object]) -> Tap:
    """The tap in use of a site-file CT entry (``terminals``, ``in_use``, ``secondary_a``)."""
    terminals = ct.get("terminals")
    if not isinstance(terminals, Mapping):
        raise ValueError(f"CT {ct.get('code')!r} has no terminal positions")
    in_use = ct.get("in_use")
    if in_use is None:
        raise ValueError(f"CT {ct.get('code')!r} has no terminals in use")
    return tap_of(terminals, in_use, float(ct.get("secondary_a", 5)))  # type: ignore[arg-type]
