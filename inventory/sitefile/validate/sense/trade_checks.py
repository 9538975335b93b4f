"""The site file's checks of the trade's strings, through the same ``trade`` functions the
engine computes with (cached: a fleet repeats the same few sizes and classes)."""

from __future__ import annotations

import functools
from collections.abc import Callable

from trade.accuracy import parse_accuracy
from trade.conductors import conductor_ohm_per_m


def wire_size_checker() -> Callable[[str, str], str | None]:
    """A cached check of (size, material) against the conductor table: None when known,
    else the table's own message."""

    @functools.cache
    def check(size: str, material: str) -> str | None:
        try:
            conductor_ohm_per_m(size, material)
        except ValueError as exc:
            return str(exc)
        return None

    return check


def accuracy_checker() -> Callable[[str, float | None, float | None], str | None]:
    """A cached check of an accuracy string with the CT's rated burden and knee point (a
    '5P20 15VA' class must agree with rated_burden_va): None when it is a class, else why not."""

    @functools.cache
    def check(text: str, rated_burden_va: float | None, knee_v: float | None) -> str | None:
        try:
            parse_accuracy(text, rated_burden_va=rated_burden_va, knee_v=knee_v)
        except ValueError as exc:
            return str(exc)
        return None

    return check
