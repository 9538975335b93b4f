"""The state of a circuit at each step of a verdict, in terminal names, for the drawing.

The drawing does not judge anything: the positions, jumpers and lifted conductors come from
replaying the verdict's operations with the engine's own simulation (``state.apply_op``, the
one the checker uses), and the CTs drawn open and the currents written on the branches come
from the verdict itself (its ``open_secondary`` findings and its ``readings``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from analysis.engine.netlist import Netlist
from analysis.engine.state import State, apply_op, normal_state

OPEN_SECONDARY = "open_secondary"


@dataclass(frozen=True)
class StepState:
    """What one step of a procedure leaves in place (the *after* state of the step).

    ``positions``: switch code -> position; ``jumpers``: (id, terminal, terminal);
    ``lifted``: the terminal pairs of lifted wires and links; ``removed``: device codes;
    ``energized``: equipment codes; ``open_cts``: the CTs an ``open_secondary`` finding of
    this step names (in any stage: a CT that opens only while a switch moves is drawn open
    too); ``readings``: the step's clamp-meter readings (``{"between": [a, b], "a": amps}``);
    ``step`` and ``op``: the verdict step it shows."""

    positions: Mapping[str, str]
    jumpers: tuple[tuple[str, str, str], ...] = ()
    lifted: frozenset[frozenset[str]] = frozenset()
    removed: frozenset[str] = frozenset()
    energized: frozenset[str] | None = None
    open_cts: frozenset[str] = frozenset()
    readings: tuple[Mapping[str, Any], ...] = ()
    step: int = 0
    op: Mapping[str, Any] | None = None
    dangers: tuple[str, ...] = field(default=())


def _of(nl: Netlist, st: State, step: Mapping[str, Any], n: int) -> StepState:
    findings = step.get("findings") or []
    open_cts = frozenset(
        str(f["ct"]) for f in findings if f.get("code") == OPEN_SECONDARY and f.get("ct")
    )
    dangers = tuple(
        f"{f.get('stage', '')}: {f.get('code')} {f.get('ct') or f.get('device') or ''}".strip()
        for f in findings
        if f.get("severity") == "danger"
    )
    lifted = frozenset(frozenset(nl.wires[k].ends) for k in st.lifted_wires) | frozenset(
        frozenset(nl.links[k].ends) for k in st.lifted_links
    )
    return StepState(
        positions=dict(st.positions),
        jumpers=tuple((j, nl.terminals[a], nl.terminals[b]) for j, a, b in st.jumpers),
        lifted=lifted,
        removed=frozenset(st.removed),
        energized=frozenset(st.energized),
        open_cts=open_cts,
        readings=tuple(step.get("readings") or ()),
        step=n,
        op=step.get("op"),
        dangers=dangers,
    )


def step_states(nl: Netlist, verdict: Mapping[str, Any]) -> list[StepState]:
    """One ``StepState`` per entry of ``verdict["steps"]`` (step 0: the normal state).

    Raises ``analysis.engine.ProcedureError`` when an operation does not apply to this
    netlist (the verdict was computed from another record)."""
    steps: Sequence[Mapping[str, Any]] = verdict.get("steps") or ()
    st = normal_state(nl)
    out: list[StepState] = []
    for n, step in enumerate(steps):
        op = step.get("op")
        if n > 0 and op is not None:
            _passed, st = apply_op(nl, st, dict(op), n)
        out.append(_of(nl, st, step, n))
    if not out:
        out.append(_of(nl, st, {}, 0))
    return out
