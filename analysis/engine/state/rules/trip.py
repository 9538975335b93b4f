"""Rule ``trip_not_isolated``: a device whose trip output is still connected while the work
changes what its inputs see (rules (a)–(d) of the findings table)."""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.quantities import Computed, Roles
from analysis.engine.state.rules.common import (
    APPEAR_FROM,
    APPEAR_TO,
    CHANGE_FRACTION,
    _fmt_a,
    input_roles_of,
)
from analysis.engine.state.rules.registry import Rule
from analysis.engine.state.solve import StateEval


def _changed(old: complex, new: complex, ref_a: float) -> bool:
    if ref_a <= 0:
        return False
    # 10 % of the input's previous current, with a floor at 1 % of the circuit's largest CT
    # current so that numerical noise on a residual input is not a change.
    return abs(new - old) > CHANGE_FRACTION * max(abs(old), CHANGE_FRACTION * ref_a)


def _appears(i0: float, i1: float, normal: float, ref: float) -> bool:
    """Rule (c): a current compared with its normal-state value appears, i.e. its excess over
    the normal magnitude goes from under 1 % to over 10 % of the circuit's largest CT current.
    A current that falls, or comes back to its normal value, is no false operating quantity
    (an overcurrent, residual or negative-sequence element operates on a magnitude above its
    setting; common practice, no source)."""
    return max(0.0, i0 - normal) < APPEAR_FROM * ref and max(0.0, i1 - normal) > APPEAR_TO * ref


def _moved(before: StateEval, ev: StateEval, dev: Any) -> bool:
    """Whether the inputs of ``dev`` moved enough for a quantity computed from them to
    appear: a residual or negative-sequence current changes by at most the sum of the
    changes of its inputs (its coefficients are of magnitude 1 or 1/3)."""
    if before is ev:
        return False
    total = ref = 0.0
    for di in dev.inputs:
        k = di.index
        total += abs(ev.inp_cur[k] - before.inp_cur[k])
        ref = max(ref, before.inp_ref_a[k], ev.inp_ref_a[k])
    return total > (APPEAR_TO - APPEAR_FROM) * ref


def _computed_appears(
    before: StateEval, ev: StateEval, dev: Any, roles: Roles
) -> tuple[Computed, float, float, float, float] | None:
    """Rule (c) on the quantities ``dev`` computes from its phase inputs (a calculated
    residual or negative-sequence current): (quantity, value before, value now, normal value,
    circuit's largest CT current) of the first that appears, else None."""
    for q in roles.computed.get(dev.code, ()):
        ref = max(max(before.inp_ref_a[k], ev.inp_ref_a[k]) for k in q.inputs)
        if ref <= 0:
            continue
        q0, q1 = abs(q.value(before.inp_cur)), abs(q.value(ev.inp_cur))
        if q1 - q0 <= (APPEAR_TO - APPEAR_FROM) * ref:
            continue  # cannot appear (the excess moves by at most |q1| - |q0|)
        qn = abs(q.value(ev.normal_ref.inp_cur))
        if _appears(q0, q1, qn, ref):
            return q, q0, q1, qn, ref
    return None


def _with_outputs(nl: Netlist) -> list[Any]:
    """The devices of ``nl`` with a trip/close output, in ``nl.devices`` order (cached)."""
    hit = nl.cache.get("devices_with_outputs")
    if hit is None:
        hit = nl.cache["devices_with_outputs"] = [d for d in nl.devices.values() if d.outputs]
    return hit


def check_trip(
    nl: Netlist, before: StateEval, ev: StateEval, work: frozenset[str], stage: str | None
) -> list[Finding]:
    """``trip_not_isolated``: the rules (a)–(c) of the findings table, while an output of the
    device is still connected to its target; rule (d), an output reconnected while an input of
    the device carries other than its normal current (``_reconnected_early``) or equipment
    energized while a connected device's input carries other than its normal current
    (``_energized_abnormal``).

    Rule (c) judges each input's current, and each quantity a relay computes from its phase
    inputs (``quantities``: a calculated residual 3I0 or negative-sequence I2), against its
    value in the normal state with the same primary (``_appears``)."""
    out: list[Finding] = []
    if not ev.any_output_connected:
        return out  # every finding here is about an output still connected
    roles: Roles | None = None
    for dev in _with_outputs(nl):
        conn = [o for o in dev.outputs if ev.out_connected[o.index]]
        if not conn:
            continue
        reason = None
        which: str | None = None
        circuit: str | None = None
        numbers: dict[str, Any] = {}
        in_work = dev.code in work
        if in_work and dev.code in ev.state.removed:
            reason = f"{dev.code}, a device the work is for, is removed"
            if dev.inputs:
                circuit = ev.circ_id.get(ev.inp_circ[dev.inputs[0].index])
        # Energizing or de-energizing the primary changes every current for a true reason;
        # the input-change rules are about what the secondary work does to them.
        same_primary = before.state.energized == ev.state.energized
        for di in dev.inputs:
            if reason is not None or not same_primary:
                break
            i0, i1 = before.inp_cur[di.index], ev.inp_cur[di.index]
            ref = max(before.inp_ref_a[di.index], ev.inp_ref_a[di.index])
            ch = _changed(i0, i1, ref)
            why = (
                "a device the work is for"
                if in_work and ch
                else "a differential relay"
                if dev.differential and ch
                else None
            )
            normal: float | None = None
            if (
                why is None
                and dev.is_relay
                and ref > 0
                and abs(i1) - abs(i0) > (APPEAR_TO - APPEAR_FROM) * ref
            ):
                normal = abs(ev.normal_ref.inp_cur[di.index])
                if _appears(abs(i0), abs(i1), normal, ref):
                    why = (
                        "a relay that sees a current rise above its normal value (a false "
                        "operating quantity)"
                    )
            if why is not None:
                which = di.name
                circuit = ev.circ_id.get(ev.inp_circ[di.index])
                pct = (abs(i1 - i0) / abs(i0) * 100) if abs(i0) > 1e-12 else float("inf")
                against = "" if normal is None else f", {_fmt_a(normal)} in the normal state"
                reason = (
                    f"input {di.name} current goes from {_fmt_a(abs(i0))} to "
                    f"{_fmt_a(abs(i1))} ({'new' if math.isinf(pct) else f'{pct:.0f} %'}"
                    f" change{against}; {dev.code} is {why})"
                )
                numbers = {
                    "from_a": round(abs(i0), 4),
                    "to_a": round(abs(i1), 4),
                    "circuit_max_a": round(ref, 4),
                }
                if normal is not None:
                    numbers["normal_a"] = round(normal, 4)
        if reason is None and same_primary and dev.is_relay and _moved(before, ev, dev):
            if roles is None:
                roles = input_roles_of(nl)
            hit = _computed_appears(before, ev, dev, roles)
            if hit is not None:
                q, q0, q1, qn, ref = hit
                which = q.name
                circuit = ev.circ_id.get(ev.inp_circ[q.inputs[0]])
                what = "residual" if q.name == "3I0" else "negative-sequence current"
                reason = (
                    f"its calculated {what} {q.name} = {q.formula} goes from {_fmt_a(q0)} to "
                    f"{_fmt_a(q1)} ({_fmt_a(qn)} in the normal state; more than 10 % of the "
                    f"circuit's largest CT current, {_fmt_a(ref)}): {dev.code} computes it for "
                    f"{'/'.join(q.functions)}, a false operating quantity"
                )
                numbers = {
                    "quantity": q.name,
                    "inputs": [nl.inputs[k].name for k in q.inputs],
                    "from_a": round(q0, 4),
                    "to_a": round(q1, 4),
                    "normal_a": round(qn, 4),
                    "circuit_max_a": round(ref, 4),
                    "functions": list(q.functions),
                }
        early = _reconnected_early(nl, before, ev, dev, conn, stage)
        if early is not None:
            out.append(early)
        energized = _energized_abnormal(nl, before, ev, dev, conn, stage)
        if energized is not None:
            out.append(energized)
        if reason is None:
            continue
        outs = ", ".join(f"{o.name} → {nl.terminals[o.target]}" for o in conn)
        out.append(
            Finding(
                code=fc.TRIP_NOT_ISOLATED,
                message=f"{dev.code} trip output still connected ({outs}) while {reason}",
                device=dev.code,
                input=which,
                circuit=circuit,
                stage=stage,
                numbers=numbers,
            )
        )
    return out


def _reconnected_early(
    nl: Netlist,
    before: StateEval,
    ev: StateEval,
    dev: Any,
    conn: list[Any],
    stage: str | None,
) -> Finding | None:
    """``trip_not_isolated`` for an output that this operation connects to its target (it was
    not connected in ``before``) while an input of the device carries a current more than
    10 % of its circuit's largest CT current away from what it carries with the secondary
    circuits in their normal state (restore the CT circuits, verify, then restore the trips;
    common practice, no source). The normal state is taken with the present primary: a CT
    whose equipment is dead carries nothing in any arrangement of its secondary."""
    new = [o for o in conn if not before.out_connected[o.index]]
    if not new or not dev.inputs:
        return None
    hit = _off_normal(ev, dev)
    if hit is None:
        return None
    return _off_normal_finding(
        nl,
        ev,
        dev,
        hit,
        new,
        stage,
        lambda outs, seen: (
            f"{dev.code} output {outs} is reconnected while input {seen}: restore the CT "
            f"circuits before the trips"
        ),
    )


def _energized_abnormal(
    nl: Netlist,
    before: StateEval,
    ev: StateEval,
    dev: Any,
    conn: list[Any],
    stage: str | None,
) -> Finding | None:
    """``trip_not_isolated`` for a step that energizes equipment while an output of the device
    is connected to its target and an input of the device carries a current more than 10 % of
    its circuit's largest CT current away from what it carries with the secondary circuits in
    their normal state and the same primary: the device sees a false operating quantity (or
    misses a true one) the moment the CTs come alive, e.g. a residual relay whose phase CT is
    shorted upstream trips the breaker as it closes (isolate the trips or restore the CT
    circuits before energizing; common practice, no source). The input-change rules of
    ``check_trip`` do not apply across a change of primary; de-energizing is not flagged."""
    added = ev.state.energized - before.state.energized
    if not added or not conn or not dev.inputs:
        return None
    hit = _off_normal(ev, dev)
    if hit is None:
        return None
    what = ", ".join(sorted(added))
    return _off_normal_finding(
        nl,
        ev,
        dev,
        hit,
        conn,
        stage,
        lambda outs, seen: (
            f"{what} is energized while {dev.code} output {outs} is connected and input "
            f"{seen}: isolate the trips or restore the CT circuits before energizing"
        ),
        energized=sorted(added),
    )


def _off_normal_finding(
    nl: Netlist,
    ev: StateEval,
    dev: Any,
    hit: tuple[Any, complex, complex, float, list[str]],
    outputs: list[Any],
    stage: str | None,
    say: Callable[[str, str], str],
    **more: Any,
) -> Finding:
    """The ``trip_not_isolated`` finding of an input off its normal current (``hit``, from
    ``_off_normal``) while ``outputs`` are connected; ``say(outs, seen)`` words the message
    around the outputs and what the input carries."""
    di, i_now, i_norm, ref, others = hit
    outs = ", ".join(
        f"{o.name} ({nl.terminals[o.terminal]} → {nl.terminals[o.target]})" for o in outputs
    )
    also = f" (and {', '.join(sorted(others))})" if others else ""
    seen = (
        f"{di.name}{also} carries {_fmt_a(abs(i_now))} against {_fmt_a(abs(i_norm))} with the "
        f"CT circuits in their normal state (more than 10 % of the circuit's largest CT "
        f"current, {_fmt_a(ref)}, apart)"
    )
    return Finding(
        code=fc.TRIP_NOT_ISOLATED,
        message=say(outs, seen),
        device=dev.code,
        input=di.name,
        circuit=ev.circ_id.get(ev.inp_circ[di.index]),
        stage=stage,
        numbers={
            "now_a": round(abs(i_now), 4),
            "normal_a": round(abs(i_norm), 4),
            "circuit_max_a": round(ref, 4),
            "outputs": [o.name for o in outputs],
            **more,
        },
    )


def _off_normal(ev: StateEval, dev: Any) -> tuple[Any, complex, complex, float, list[str]] | None:
    """The input of ``dev`` furthest (as a fraction of its circuit's largest CT current) from
    its current in ``ev.normal_ref`` when more than 10 % away: (input, current now, normal
    current, circuit's largest CT current, the other inputs that far away); None otherwise."""
    ref_ev = ev.normal_ref
    worst: tuple[float, Any, complex, complex, float] | None = None
    others: list[str] = []
    for di in dev.inputs:
        k = di.index
        ref = max(ref_ev.inp_ref_a[k], ev.inp_ref_a[k])
        if ref <= 0:
            continue
        i_now, i_norm = ev.inp_cur[k], ref_ev.inp_cur[k]
        off = abs(i_now - i_norm)
        if off <= CHANGE_FRACTION * ref:
            continue
        if worst is None or off / ref > worst[0] + 1e-9:  # ties: the first input named
            if worst is not None:
                others.append(worst[1].name)
            worst = (off / ref, di, i_now, i_norm, ref)
        else:
            others.append(di.name)
    if worst is None:
        return None
    _, di, i_now, i_norm, ref = worst
    return di, i_now, i_norm, ref, others


RULE = Rule(
    name="trip_not_isolated",
    codes=(fc.TRIP_NOT_ISOLATED,),
    check=lambda nl, c: check_trip(nl, c.before, c.ev, c.work, c.stage),
    skip="never",
)
