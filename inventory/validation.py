"""Small value checks shared by model validation and the site-file validator. Each returns
``None`` when the value is good, or a message saying what is wrong. (The ratio setting check is
the trade's: ``trade.ratio.ratio_setting_error``.)"""

from __future__ import annotations

import math
from typing import Any


def excitation_error(points: Any) -> str | None:
    """An excitation curve is a list of at least two ``[exciting current A, secondary V]``
    pairs, positive and strictly increasing in both."""
    if not isinstance(points, list) or len(points) < 2:
        return "excitation curve needs at least two [exciting current A, secondary V] points"
    previous: list | None = None
    for index, point in enumerate(points):
        if (
            not isinstance(point, list | tuple)
            or len(point) != 2
            or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in point)
        ):
            return f"point {index} must be a pair of numbers [A, V], got {point!r}"
        current_a, volts = float(point[0]), float(point[1])
        if not (math.isfinite(current_a) and math.isfinite(volts)) or current_a <= 0 or volts <= 0:
            return f"point {index} must be positive, got {list(point)!r}"
        if previous and (current_a <= previous[0] or volts <= previous[1]):
            return (
                f"points must increase in both current and voltage; point {index} "
                f"{list(point)!r} does not exceed point {index - 1} {list(previous)!r}"
            )
        previous = list(point)
    return None
