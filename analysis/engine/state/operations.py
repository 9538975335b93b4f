"""The operations of a procedure (design.md): ``set``, ``add_jumper``, ``remove_jumper``,
``lift``, ``land``, ``remove_device``, ``insert_device``, ``deenergize``, ``energize``, ``note``,
and the circuit ``State`` they act on.

A *state* is: switch positions, temporary jumpers, lifted wires and links, removed devices and
energized equipment. A CT is *live* while its equipment is energized (a CT with no recorded
equipment is taken as live).

A ``set`` yields a *transition* state while the switch moves: for ``make_before_break`` the
union of the contacts closed in the old and in the new position, for ``break_before_make``
their intersection, for ``simultaneous`` none (the new state at once). A switch with more than
two positions (a rotary ammeter or selector switch) moves through the positions between the
old and the new one in their recorded order (``netlist.Switch.travels``): each is a state of
its own, with a transition state on each side.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

from analysis.engine.netlist import Netlist
from record.operations import operation_key
from siterules.procedure_refs import Problem, RecordNames, default_jumper_id, procedure_problems


class ProcedureError(ValueError):
    """A step names something the site does not have, or cannot be carried out.

    ``problems`` holds every problem found (``siterules.procedure_refs.Problem``) when the
    error comes from the procedure rule; the message lists them, one per line."""

    def __init__(self, message: str, problems: tuple[Problem, ...] = ()) -> None:
        super().__init__(message)
        self.problems = problems

    @classmethod
    def of(cls, problems: list[Problem], prefix: tuple[str | int, ...] = ()) -> ProcedureError:
        """The error for the problems of one procedure (``prefix``: its JSON pointer tokens in
        the site document), each line naming the step as the verdict numbers it (1-based, step
        0 being the state before) and the pointer of the value at fault."""
        lines = [
            f"step {p.step + 1} ({p.pointer(*prefix)}): {p.message}"
            if p.step is not None
            else f"{p.pointer(*prefix)}: {p.message}"
            for p in problems
        ]
        return cls("\n".join(lines), tuple(problems))


def record_names(nl: Netlist, conductors: bool = True) -> RecordNames:
    """What a procedure on this netlist may name (``siterules.procedure_refs``), built once.

    ``conductors`` False leaves out the wires and links (the two ends of each), which only a
    ``lift`` or ``land`` looks up (``names_for``): a site has hundreds of them."""
    hit: RecordNames | None = nl.cache.get("record_names")
    if hit is not None:
        return hit
    if not conductors:
        bare: RecordNames | None = nl.cache.get("record_names_bare")
        if bare is None:
            bare = nl.cache["record_names_bare"] = _names(nl, False)
        return bare
    hit = nl.cache["record_names"] = _names(nl, True)
    return hit


def _names(nl: Netlist, conductors: bool) -> RecordNames:
    return RecordNames(
        terminals=frozenset(nl.index),
        switches={code: sw.positions for code, sw in nl.switches.items()},
        devices=frozenset(nl.devices),
        equipment=frozenset(nl.equipment),
        wires=frozenset(frozenset(w.ends) for w in nl.wires if w.a != w.b)
        if conductors
        else frozenset(),
        links=frozenset(frozenset(k.ends) for k in nl.links if k.a != k.b)
        if conductors
        else frozenset(),
    )


def names_for(nl: Netlist, ops: list[Any]) -> RecordNames:
    """``record_names`` enough to check ``ops``: the wires and links only when one of them is
    a ``lift`` or ``land`` (no other operation looks them up)."""
    return record_names(
        nl, any(isinstance(op, dict) and ("lift" in op or "land" in op) for op in ops)
    )


@dataclass(frozen=True, slots=True)
class State:
    """One circuit state. ``override`` replaces the closed contacts of one switch while it is
    in transition: (switch code, global contact indices closed)."""

    positions: tuple[tuple[str, str], ...]
    jumpers: tuple[tuple[str, int, int], ...] = ()
    lifted_wires: frozenset[int] = frozenset()
    lifted_links: frozenset[int] = frozenset()
    removed: frozenset[str] = frozenset()
    energized: frozenset[str] = frozenset()
    override: tuple[str, frozenset[int]] | None = None

    def position(self, switch: str) -> str:
        return dict(self.positions)[switch]


def normal_state(nl: Netlist) -> State:
    """Every switch in its normal position, nothing lifted, removed or jumpered, equipment as
    recorded (``in_service``)."""
    return State(
        positions=tuple((code, sw.normal) for code, sw in nl.switches.items()),
        energized=frozenset(e.code for e in nl.equipment.values() if e.in_service),
    )


def _pair(op: dict[str, Any], key: str) -> tuple[str, str]:
    pair = op[key]
    return str(pair[0]), str(pair[1])


def _between(nl: Netlist, a: str, b: str) -> tuple[list[int], list[int]]:
    ends = {(a, b), (b, a)}
    wires = [w.index for w in nl.wires if w.ends in ends]
    links = [k.index for k in nl.links if k.ends in ends]
    return wires, links


def op_kind(op: dict[str, Any]) -> str:
    """The operation an op dict names (its key), or "" for none of design.md's (the record's
    vocabulary, ``record.operations``)."""
    return operation_key(op)


def validate_op(nl: Netlist, op: Any, step: int) -> None:
    """Raise ``ProcedureError`` when ``op``, taken alone, names a switch, position, terminal,
    wire or link, device or equipment the site does not have (the names part of
    ``siterules.procedure_refs``; jumper ids and lifted conductors depend on the steps before,
    see ``check_operations``). ``step`` is the step's number (1-based)."""
    problems = procedure_problems(names_for(nl, [op]), [op], sequence=False)
    if problems:
        raise ProcedureError.of(
            [replace(p, step=step - 1, at=("steps", step - 1, *p.at[2:])) for p in problems]
        )


def _with(
    st: State,
    *,
    positions: tuple[tuple[str, str], ...] | None = None,
    jumpers: tuple[tuple[str, int, int], ...] | None = None,
    lifted_wires: frozenset[int] | None = None,
    lifted_links: frozenset[int] | None = None,
    removed: frozenset[str] | None = None,
    energized: frozenset[str] | None = None,
    override: tuple[str, frozenset[int]] | None = None,
) -> State:
    """``st`` (not in transition) with the given parts changed: ``dataclasses.replace``
    without its generic machinery (a procedure makes one per operation)."""
    return State(
        st.positions if positions is None else positions,
        st.jumpers if jumpers is None else jumpers,
        st.lifted_wires if lifted_wires is None else lifted_wires,
        st.lifted_links if lifted_links is None else lifted_links,
        st.removed if removed is None else removed,
        st.energized if energized is None else energized,
        override,
    )


def apply_op(
    nl: Netlist, state: State, op: dict[str, Any], step: int, *, validated: bool = False
) -> tuple[tuple[State, ...], State]:
    """Carry out one operation: (the states passed on the way, in order; the state after).

    A ``set`` passes, for each move between neighbouring positions, the transition state of
    the switch's transition type, and each position on the way (``Switch.path``: a switch
    with more than two positions moves through them in their recorded order, so a rotary
    switch set from P1 to P3 rests in P2 on the way). Other operations pass no state.
    ``validated``: the caller has checked ``op`` as ``validate_op`` does."""
    if not validated:
        validate_op(nl, op, step)
    kind = op_kind(op)
    st = state if state.override is None else replace(state, override=None)
    if kind == "set":
        sw = nl.switches[str(op["set"])]
        pos = dict(st.positions)
        old_pos = pos[sw.code]
        if old_pos == str(op["to"]):
            return (), st
        passed: list[State] = []
        cur = st
        for nxt in sw.path(old_pos, str(op["to"])):
            here = pos[sw.code]
            pos[sw.code] = nxt
            reached = _with(st, positions=tuple(pos.items()))
            old_c, new_c = sw.closed(here), sw.closed(nxt)
            if sw.transition == "make_before_break":
                during: frozenset[int] | None = old_c | new_c
            elif sw.transition == "simultaneous":
                during = None
            else:  # break_before_make, and any unknown kind (the safe reading)
                during = old_c & new_c
            if during is not None and during != new_c:
                passed.append(_with(cur, override=(sw.code, during)))
            passed.append(reached)
            cur = reached
        return tuple(passed[:-1]), passed[-1]
    if kind == "add_jumper":
        a, b = _pair(op, "add_jumper")
        jid = str(op.get("id") or default_jumper_id(step - 1))
        if any(j[0] == jid for j in st.jumpers):
            raise ProcedureError(f"step {step}: jumper {jid!r} is already in place")
        jumpers = (*st.jumpers, (jid, nl.index[a], nl.index[b]))
        return (), _with(st, jumpers=tuple(sorted(jumpers)))
    if kind == "remove_jumper":
        jid = str(op["remove_jumper"])
        if not any(j[0] == jid for j in st.jumpers):
            placed = ", ".join(j[0] for j in st.jumpers) or "none"
            raise ProcedureError(
                f"step {step}: unknown jumper {jid!r} (jumpers in place: {placed})"
            )
        return (), _with(st, jumpers=tuple(j for j in st.jumpers if j[0] != jid))
    if kind in ("lift", "land"):
        a, b = _pair(op, kind)
        wires, links = _between(nl, a, b)
        if kind == "lift":
            return (), _with(
                st,
                lifted_wires=st.lifted_wires | set(wires),
                lifted_links=st.lifted_links | set(links),
            )
        return (), _with(
            st, lifted_wires=st.lifted_wires - set(wires), lifted_links=st.lifted_links - set(links)
        )
    if kind == "remove_device":
        return (), _with(st, removed=st.removed | {str(op[kind])})
    if kind == "insert_device":
        return (), _with(st, removed=st.removed - {str(op[kind])})
    if kind == "deenergize":
        return (), _with(st, energized=st.energized - {str(op[kind])})
    if kind == "energize":
        return (), _with(st, energized=st.energized | {str(op[kind])})
    return (), st  # note
