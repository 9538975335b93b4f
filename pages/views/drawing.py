"""The circuit drawings of the pages, from ``analysis.drawing`` (one SVG per step, all of one
procedure with the same layout; the procedure page draws one step per request)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from analysis.drawing import DrawingError, circuit_svg, procedure_svgs, step_states


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


def procedure_step_drawing(
    source: Any, verdict: dict[str, Any], *, step: int, devices: Sequence[str]
) -> str | None:
    """The SVG of one step of ``verdict``, the same bytes as ``procedure_drawings(...)[step]``
    (the layout still makes room for what every step adds, so the drawings of a walk line up)
    at the cost of one graphviz run instead of one per step. None when no device is named,
    the record cannot be drawn or there is no such step."""
    if not devices:
        return None
    try:
        states = step_states(source, verdict)
        if not 0 <= step < len(states):
            return None
        return circuit_svg(
            source,
            state=states[step],
            highlight=tuple(devices),
            devices=tuple(devices),
            layout_states=states,
        )
    except DrawingError:
        return None


def devices_drawing(source: Any, devices: Sequence[str]) -> str | None:
    """The devices' CT circuits and trip paths in the normal state (None: nothing to draw)."""
    if not devices:
        return None
    try:
        return circuit_svg(source, devices=tuple(devices), highlight=tuple(devices))
    except DrawingError:
        return None
