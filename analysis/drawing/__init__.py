"""Circuit drawings of the record (SVG, laid out by graphviz), with a procedure step's state.

No Django here: the pages call these with the netlist or site document and the verdict JSON
they already have (``analysis.actions``).

- ``circuit_svg(source, *, circuit=, device=, ct=, state=, highlight=, title=)``: one drawing;
- ``step_states(netlist, verdict)``: the state after each step of a verdict, for ``state=``;
- ``procedure_svgs(source, verdict, ...)``: one drawing per verdict step.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import record as rec
from analysis.drawing.states import StepState
from analysis.drawing.states import step_states as _step_states
from analysis.drawing.svg import DrawingError, as_netlist, circuit_dot, circuit_svg, region
from analysis.engine.netlist import Netlist


def step_states(
    source: Netlist | rec.SiteRecord | Mapping[str, Any], verdict: Mapping[str, Any]
) -> list[StepState]:
    """One ``StepState`` per step of ``verdict`` (a procedure verdict, or a plan's
    ``verdict``), step 0 being the normal state."""
    return _step_states(as_netlist(source), verdict)


def procedure_svgs(
    source: Netlist | rec.SiteRecord | Mapping[str, Any],
    verdict: Mapping[str, Any],
    *,
    circuit: str | None = None,
    device: str | None = None,
    ct: str | None = None,
    highlight: Iterable[str] = (),
    devices: Iterable[str] = (),
) -> list[str]:
    """``circuit_svg`` of every step of ``verdict`` (index = step number), all with the same
    layout: what any step adds (a jumper, an open-CT marker, a danger line) has its room in
    every step, so a planner walking the steps sees the states change, not the drawing."""
    nl = as_netlist(source)
    marks = tuple(highlight)
    several = tuple(devices)
    states = _step_states(nl, verdict)
    return [
        circuit_svg(
            nl,
            circuit=circuit,
            device=device,
            ct=ct,
            state=s,
            highlight=marks,
            devices=several,
            layout_states=states,
        )
        for s in states
    ]


__all__ = [
    "DrawingError",
    "StepState",
    "circuit_dot",
    "circuit_svg",
    "procedure_svgs",
    "region",
    "step_states",
]
