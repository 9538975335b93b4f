"""The circuit drawings of the pages, from ``analysis.drawing`` (one SVG per step)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from analysis.drawing import DrawingError, circuit_svg, procedure_svgs


def procedure_drawings(source: Any, verdict: dict[str, Any], *, devices: Sequence[str]) -> list[str]:
    """One SVG per step of ``verdict`` (index = step number), drawn around the first device
    the work is for; none when no device is named or the record cannot be drawn."""
    if not devices:
        return []
    try:
        return procedure_svgs(source, verdict, device=devices[0], highlight=tuple(devices))
    except DrawingError:
        return []


def device_drawing(source: Any, device: str) -> str | None:
    """The device's CT circuits and trip paths in the normal state."""
    try:
        return circuit_svg(source, device=device, highlight=(device,))
    except DrawingError:
        return None
