"""The words and numbers of a plan: a one-line ``why`` and the ``readings`` of every step.

``annotate`` turns the operations ``plan.plan_isolation`` found into the steps a planner reads:
the trips opened (whose, and why another relay's), the CT work (what each operation shorts
and what it takes off which input, with the currents), a closing note that says how the
device is free to remove, the restoration, a step to verify the relays' currents (their
normal values) and the trips closed last. The ``readings`` of a step are what a clamp meter
would read after it (``readings.readings_of``).
"""

from __future__ import annotations

from typing import Any

from analysis.engine.readings import input_readings, readings_of, shorting_currents
from analysis.engine.state import APPEAR_FROM, CHANGE_FRACTION, State, StateEval, apply_op

# Input changes named in one why; the rest are counted.
MAX_NAMED = 4


def _amps(x: float) -> str:
    return f"{x:.2f} A"


def _outs(nl: Any, outs: list[Any]) -> str:
    return ", ".join(
        f"{o.name} ({nl.terminals[o.terminal]} → {nl.terminals[o.target]})" for o in outs
    )


def _parted(nl: Any, before: StateEval, after: StateEval) -> tuple[list[Any], list[Any]]:
    """(outputs parted from their target by the step, outputs joined to it by the step)."""
    opened = [
        o for o in nl.outputs if before.out_connected[o.index] and not after.out_connected[o.index]
    ]
    closed = [
        o for o in nl.outputs if after.out_connected[o.index] and not before.out_connected[o.index]
    ]
    return opened, closed


def _by_device(outs: list[Any]) -> dict[str, list[Any]]:
    hit: dict[str, list[Any]] = {}
    for o in outs:
        hit.setdefault(o.device, []).append(o)
    return hit


def trip_why(
    search: Any,
    before: StateEval,
    after: StateEval,
    changed: dict[str, tuple[str, float, float, bool]],
) -> str:
    """Why a trip-path operation: whose trip it opens or closes, and for another relay than
    the device, why the plan touches it."""
    nl = search.nl
    device = search.device
    opened, closed = _parted(nl, before, after)
    clauses = []
    for dev, outs in _by_device(opened).items():
        if dev == device:
            clauses.append(f"open {dev}'s trip {_outs(nl, outs)} before any CT circuit is touched")
            continue
        hit = changed.get(dev)
        if hit is None:
            why = f"{dev} is on the CT circuits of the work"
        elif hit[3]:
            why = (
                f"the work changes which CT currents reach {dev} {hit[0]} (it reads "
                f"{_amps(hit[1])} under load either way, but would see a fault wrongly)"
            )
        else:
            why = (
                f"the work changes what {dev} measures ({hit[0]} {_amps(hit[1])} normally, "
                f"{_amps(hit[2])} during the work) and it would trip falsely"
            )
        clauses.append(f"open {dev}'s trip {_outs(nl, outs)}: {why}")
    for dev, outs in _by_device(closed).items():
        clauses.append(
            f"close {dev}'s trip {_outs(nl, outs)} last, with its CT circuits back to normal "
            "and its currents verified"
        )
    if not clauses:
        return "trip-path switch back to its normal position (it parts nothing the work needs)"
    return "; ".join(clauses)


def _input_changes(nl: Any, before: StateEval, after: StateEval) -> list[str]:
    """Inputs whose current changes (more than 1 % of the circuit's largest CT current and
    10 % of the smaller value), as "device input before → after"."""
    out: list[str] = []
    for i in nl.inputs:
        if i.device in before.state.removed or i.device in after.state.removed:
            continue
        k = i.index
        b, a = float(before.inp_abs[k]), float(after.inp_abs[k])
        ref = max(before.inp_ref_a[k], after.inp_ref_a[k])
        if ref <= 0 or abs(a - b) <= max(APPEAR_FROM * ref, CHANGE_FRACTION * min(a, b)):
            continue
        out.append(f"{i.device} {i.name} {_amps(b)} → {_amps(a)}")
    return out


def _named(items: list[str]) -> str:
    if len(items) <= MAX_NAMED:
        return ", ".join(items)
    return ", ".join(items[:MAX_NAMED]) + f" and {len(items) - MAX_NAMED} more"


def ct_why(
    search: Any,
    op: dict[str, Any],
    before_st: State,
    after_st: State,
    before: StateEval,
    after: StateEval,
    restoring: bool,
) -> str:
    """Why a CT-side operation: the shorts it makes or removes (with their current), the
    inputs it takes off or puts back on their CTs, or how it frees the device."""
    nl = search.nl
    device = search.device
    s0 = {(e, ends): a for e, ends, a, _ in shorting_currents(nl, before)}
    s1 = {(e, ends): a for e, ends, a, _ in shorting_currents(nl, after)}
    clauses = []
    made = [(k, a) for k, a in s1.items() if k not in s0]
    if made:
        mbb = ""
        if "set" in op and nl.switches[op["set"]].transition == "make_before_break":
            mbb = " (make-before-break: made before the circuit opens)"
        clauses.append(
            "shorts the CT circuit at "
            + ", ".join(f"{t1}–{t2} ({_amps(a)})" for (_, (t1, t2)), a in made)
            + mbb
        )
    gone = [k for k in s0 if k not in s1]
    if gone:
        clauses.append("removes the short at " + ", ".join(f"{t1}–{t2}" for _, (t1, t2) in gone))
    moves = _input_changes(nl, before, after)
    if moves:
        clauses.append("input currents " + _named(moves))
    free = search.free
    what = op.get("set") or op.get("remove_jumper") or op.get("id") or "this point"
    parts_now = free.attached(after_st) - free.attached(before_st)
    if not restoring and parts_now < 0:
        clauses.append(
            f"parts {device} from the CT circuit at {what}, so that it is free to remove"
        )
    elif restoring and parts_now > 0:
        clauses.append(f"reconnects {device} at {what} as in normal service")
    if not clauses:
        clauses.append(f"{what}: no current changes")
    return "; ".join(clauses)


def _free_note(search: Any, moved: list[str], end: State) -> dict[str, Any]:
    """The closing note of the isolation: how the device is free to remove, or what still
    joins it (no provision parts it)."""
    nl = search.nl
    device = search.device
    cases = [c for c in moved if nl.switches[c].kind == "draw_out_case"]
    if cases:
        how = f"draw-out case {', '.join(cases)} withdrawn"
    elif moved:
        how = f"its inputs and outputs are opened at {', '.join(moved)}"
    else:
        how = "its CT circuits are shorted ahead of it by temporary jumpers"
    joined = search.free.joined(end)
    if joined:
        terms = ", ".join(nl.terminals[t] for t in joined)
        one = len(joined) == 1
        text = (
            f"{device} carries no current and operates nothing ({how}), but {terms} "
            f"{'stays' if one else 'stay'} joined to the CT circuit or a trip target (no "
            f"recorded provision parts {'it' if one else 'them'}): lift "
            f"{'that connection' if one else 'those connections'}, with the CT circuit "
            f"shorted as above, before removing {device}"
        )
    else:
        text = f"{device} is free to remove: {how}"
    return {
        "note": text,
        "why": (
            f"isolation complete: {device}'s inputs carry no current whatever its CTs drive "
            "and its outputs are parted from their targets"
        ),
    }


def annotate(
    search: Any,
    trips: list[dict[str, Any]],
    core: list[dict[str, Any]],
    restore_ct: list[dict[str, Any]],
    changed: dict[str, tuple[str, float, float, bool]],
) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """The isolate and restore steps of a plan, each operation with ``why`` and
    ``readings``; notes close the isolation (free to remove) and come before the trips on
    the way back (verify the currents)."""
    nl = search.nl
    device = search.device
    start = search.start
    normal = dict(start.positions)
    trip_set = set(search.trip_switches)
    closes = [{"set": op["set"], "to": normal[op["set"]]} for op in reversed(trips)]

    states = [start]
    for n, op in enumerate([*trips, *core, *restore_ct], start=1):
        _, st = apply_op(nl, states[-1], op, n)
        states.append(st)
    end_restored = states[-1]
    for n, op in enumerate(closes, start=1):
        _, st = apply_op(nl, states[-1], op, n)
        states.append(st)
    evs = search.eval(states)
    seq = [*trips, *core, *restore_ct]
    n_iso = len(trips) + len(core)

    reads = readings_of(nl, evs)
    steps: list[dict[str, Any]] = []
    for k, op in enumerate(seq):
        b_ev, a_ev = evs[k], evs[k + 1]
        if "set" in op and op["set"] in trip_set:
            why = trip_why(search, b_ev, a_ev, changed)
        else:
            why = ct_why(search, op, states[k], states[k + 1], b_ev, a_ev, k >= n_iso)
        steps.append({**op, "why": why, "readings": reads[k + 1]})
    isolate = steps[:n_iso]
    moved = list(dict.fromkeys(op["set"] for op in [*trips, *core] if "set" in op))
    isolate.append({**_free_note(search, moved, states[n_iso]), "readings": reads[n_iso]})

    restore = steps[n_iso:]
    watched = {device} | set(changed)
    restored_ev = evs[len(seq)]
    expect = input_readings(nl, restored_ev, watched)
    names = {(nl.terminals[i.a], nl.terminals[i.b]): f"{i.device} {i.name}" for i in nl.inputs}
    listing = ", ".join(f"{names[tuple(r['between'])]} {r['a']:.2f} A" for r in expect)
    restore.append(
        {
            "note": (
                f"verify with a clamp meter, before any trip is closed, that the relays read "
                f"their normal currents: {listing or 'no inputs'}"
                if closes
                else f"verify with a clamp meter that {device} reads its normal currents "
                f"again: {listing or 'no inputs'}"
            ),
            "why": (
                "the CT circuits are back as in normal service; a current off its normal "
                "value here would operate a relay the moment its trip is closed"
            ),
            "readings": expect,
        }
    )
    base = len(seq)
    for m, op in enumerate(closes):
        b_ev, a_ev = evs[base + m], evs[base + m + 1]
        restore.append(
            {
                **op,
                "why": trip_why(search, b_ev, a_ev, changed),
                "readings": reads[base + m + 1],
            }
        )
    if states[-1].positions != start.positions or end_restored.jumpers:
        raise RuntimeError(f"the restoration of {device} does not end in the normal state")
    return isolate, restore
