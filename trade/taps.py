"""A CT's winding as registers write it: terminal positions, the tap in use, and the
full-ratio shorthand of a standard multi-ratio CT (``600:5 MR``).

A multi-ratio CT's terminals X1..X5 sit at cumulative primary amperes along the winding; the
positions of the standard full ratios below reproduce the ratio table of each terminal pair as
published for IEEE C57.13 multi-ratio bushing CTs (reproduced on a public forum; agreement with
the standard itself from memory). A plain ratio without ``MR`` (``400:5``) is a single-ratio CT:
X1 at 0 and X2 at the primary rating.
"""

from __future__ import annotations

import re

# Full ratio (primary A) -> positions of X1..X5 (primary A).
STANDARD_MULTI_RATIO: dict[int, tuple[int, int, int, int, int]] = {
    600: (0, 100, 150, 400, 600),
    1200: (0, 200, 300, 800, 1200),
    2000: (0, 400, 1200, 1500, 2000),
    3000: (0, 1000, 2200, 2500, 3000),
    4000: (0, 500, 2000, 3000, 4000),
    5000: (0, 1500, 2000, 4000, 5000),
}

_SHORTHAND = re.compile(
    r"^\s*(?P<primary>\d+(?:\.\d+)?)\s*[:/]\s*(?P<secondary>[15])\s*(?P<mr>MR)?\s*$", re.IGNORECASE
)
_TAP_SPLIT = re.compile(r"\s*(?:[-–—,;/]|\s)\s*")


def _number(text: str) -> float:
    value = float(text)
    if value != value or value in (float("inf"), float("-inf")):
        raise ValueError(f"{text!r} is not a finite number")
    return value


def parse_terminals(text: str) -> tuple[dict[str, float], float | None]:
    """The terminal positions a register cell gives, with the secondary rating the shorthand
    names (None for the explicit form).

    ``X1=0;X2=100;X3=150`` (cumulative primary A per terminal), ``600:5 MR`` (a standard
    multi-ratio CT) or ``400:5`` (single ratio, X1-X2). Raises ``ValueError`` saying what is
    wrong."""
    text = str(text).strip()
    shorthand = _SHORTHAND.match(text)
    if shorthand:
        primary = _number(shorthand["primary"])
        secondary = float(shorthand["secondary"])
        if shorthand["mr"]:
            key = int(primary) if primary.is_integer() else None
            if key not in STANDARD_MULTI_RATIO:
                known = ", ".join(f"{p}:5 MR" for p in STANDARD_MULTI_RATIO)
                raise ValueError(
                    f"no standard multi-ratio table for {text!r} (known: {known}); give the "
                    "positions as X1=0;X2=...;X5=..."
                )
            positions = STANDARD_MULTI_RATIO[key]
            return {f"X{i + 1}": float(p) for i, p in enumerate(positions)}, secondary
        if primary <= 0:
            raise ValueError(f"ratio {text!r}: the primary rating must be positive")
        return {"X1": 0.0, "X2": primary}, secondary
    terminals: dict[str, float] = {}
    parts = [p for p in re.split(r"\s*[;,]\s*", text) if p]
    if not parts:
        raise ValueError("no terminals given")
    for part in parts:
        name, sep, position = part.partition("=")
        name = name.strip()
        if not sep or not name:
            raise ValueError(
                f"{part!r} is not NAME=POSITION; write the winding as X1=0;X2=100;... or a "
                "full ratio such as 600:5 MR"
            )
        if name in terminals:
            raise ValueError(f"terminal {name!r} is given twice")
        try:
            terminals[name] = _number(position.strip())
        except ValueError:
            raise ValueError(
                f"position of {name} must be a number of primary amperes, got {position.strip()!r}"
            ) from None
    return terminals, None


def format_terminals(terminals: dict[str, float] | list[tuple[str, float]]) -> str:
    """``X1=0;X2=100;...`` (integral positions without a fractional part)."""
    items = terminals.items() if isinstance(terminals, dict) else terminals
    return ";".join(f"{name}={_plain(position)}" for name, position in items)


def _plain(value: float) -> str:
    return str(int(value)) if float(value).is_integer() else repr(float(value))


def parse_tap(text: str) -> tuple[str, str]:
    """A tap as two terminal names: ``X1-X4`` (also ``X1–X4``, ``X1,X4``, ``X1 X4``). The
    order matters: current leaves the first terminal."""
    parts = [p for p in _TAP_SPLIT.split(str(text).strip()) if p]
    if len(parts) != 2:
        raise ValueError(f"a tap is two terminals such as X1-X4, got {str(text).strip()!r}")
    return parts[0], parts[1]


def format_tap(tap: tuple[str, ...] | list[str]) -> str:
    return "-".join(tap)
