"""Rule ``open_secondary``: a live CT whose terminals in use are not joined by a closed path."""

from __future__ import annotations

from typing import Any

from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.state.rules.common import APPEAR_FROM, _fault_text, _fmt_a
from analysis.engine.state.rules.registry import Rule
from analysis.engine.state.solve import StateEval


def _open_returns(nl: Netlist, ev: StateEval) -> dict[str, list[Any]]:
    """Set name -> its live open phase CTs, for each three-phase set whose return (neutral)
    is open while its phases still form a loop: every open CT of the set has its first
    terminal in one conduction component and its second in another, the same for all, and
    their load currents add up to about 0 there (a balanced set). The load then circulates
    through the phases; only the zero-sequence current has no path."""
    groups: dict[str, list[Any]] = {}
    lo = ev.live_open
    for ct in nl.ct_list:
        if lo[ct.index] and ct.set_name and (ct.phase or "") in ("A", "B", "C"):
            groups.setdefault(ct.set_name, []).append(ct)
    if not groups:
        return {}
    parts = ev._b.ct_parts[ev._row]
    load = nl.arrays.ct_load
    out = {}
    for name, cts in groups.items():
        ends = {(int(parts[c.index, 0]), int(parts[c.index, 1])) for c in cts}
        if len(cts) < 2 or len(ends) != 1:
            continue
        net = abs(sum(load[c.index] for c in cts))
        if net <= APPEAR_FROM * max(abs(load[c.index]) for c in cts):
            out[name] = cts
    return out


def check_open_secondary(nl: Netlist, ev: StateEval, stage: str | None) -> list[Finding]:
    """``open_secondary``: a live CT whose terminals in use are not joined by a closed path.

    The message states what really flows: a phase CT drives its load current into the open
    circuit; a neutral CT carries only the unbalance in normal service but the ground-fault
    current in a fault; a three-phase set whose return (neutral) is open still circulates its
    balanced load through the phases, and the hazard is the zero-sequence current of a ground
    fault, which has no path (common practice, no source)."""
    out: list[Finding] = []
    if not ev.any_live_open:
        return out
    returns = {c.code: name for name, cts in _open_returns(nl, ev).items() for c in cts}
    for ct in nl.ct_list:
        k = ct.index
        if not (ev.live[k] and ev.ct_open[k]):
            continue
        eq = nl.equipment.get(ct.equipment or "")
        load = (
            f"{eq.max_load_a:g} A primary load"
            if eq and eq.max_load_a is not None
            else "load unknown, 1 A assumed"
        )
        head = (
            f"CT {ct.code} ({ct.ratio_text}, tap {ct.in_use[0]}-{ct.in_use[1]}) is live and "
            f"its secondary is open"
        )
        numbers: dict[str, Any] = {"secondary_a": round(ct.load_secondary_a, 4)}
        if (ct.phase or "") == "N":
            fault, sec = _fault_text(nl, ct)
            message = (
                f"{head}: as a neutral CT it carries the unbalance, about 0 A in normal "
                f"service, but a ground fault drives {fault} into the open circuit"
            )
            numbers["ground_fault_secondary_a"] = None if sec is None else round(sec, 2)
        elif ct.code in returns:
            name = returns[ct.code]
            fault, sec = _fault_text(nl, ct)
            message = (
                f"{head} for zero-sequence current: the return (neutral) of set {name} is "
                f"open. The balanced load still circulates through the phases "
                f"({_fmt_a(ct.load_secondary_a)} secondary in each, {load}, returning through "
                f"the other phase CTs), but the zero-sequence current 3I0 of a ground fault "
                f"has no path: a ground fault on this phase drives {fault} into the open "
                f"circuit"
            )
            numbers["open_return"] = name
            numbers["ground_fault_secondary_a"] = None if sec is None else round(sec, 2)
        else:
            message = (
                f"{head}: it would be driving {_fmt_a(ct.load_secondary_a)} secondary ({load}) "
                f"into an open circuit"
            )
        out.append(
            Finding(
                code=fc.OPEN_SECONDARY,
                message=message,
                ct=ct.code,
                circuit=ev.circ_id.get(ev.ct_circ[k]),
                stage=stage,
                numbers=numbers,
            )
        )
    return out


RULE = Rule(
    name="open_secondary",
    codes=(fc.OPEN_SECONDARY,),
    check=lambda nl, c: check_open_secondary(nl, c.ev, c.stage),
    skip="never",
)
