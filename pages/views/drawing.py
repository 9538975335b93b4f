"""The circuit drawings of the pages, from ``analysis.drawing`` (one SVG per step)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from analysis.drawing import DrawingError, circuit_svg, procedure_svgs


def procedure_drawings(
    source: Any, verdict: dict[str, Any], *, devices: Sequence[str]
) -> list[str]:
    """One SVG per step of ``verdict`` (index = step number), drawn around the devices the
    work is for; none when no device is named or the record cannot be drawn."""
    if not devices:
        return []
    try:
        return procedure_svgs(source, verdict, devices=tuple(devices), highlight=tuple(devices))
    except DrawingError:
        return []


def devices_drawing(source: Any, devices: Sequence[str]) -> str | None:
    """The devices' CT circuits and trip paths in the normal state (None: nothing to draw)."""
    if not devices:
        return None
    try:
        return circuit_svg(source, devices=tuple(devices), highlight=tuple(devices))
    except DrawingError:
        return None
