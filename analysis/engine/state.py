"""Circuit states, the operations of a procedure, and the state checks.

A *state* is: switch positions, temporary jumpers, lifted wires and links, removed devices and
energized equipment. A CT is *live* while its equipment is energized (a CT with no recorded
equipment is taken as live). Operations (design.md): ``set``, ``add_jumper``, ``remove_jumper``,
``lift``, ``land``, ``remove_device``, ``insert_device``, ``deenergize``, ``energize``, ``note``.

A ``set`` yields a *transition* state while the switch moves: for ``make_before_break`` the
union of the contacts closed in the old and in the new position, for ``break_before_make``
their intersection, for ``simultaneous`` none (the new state at once). A switch with more than
two positions (a rotary ammeter or selector switch) moves through the positions between the
old and the new one in their recorded order (``netlist.Switch.travels``): each is a state of
its own, with a transition state on each side.

Currents in a state come from one nodal solve (``topology.solve``): each live CT injects its
load current (equipment maximum load / ratio; 1 A where unknown) at its phase angle (A 0°,
B −120°, C +120°). A second, *probe* column injects unit currents at unrelated angles so that
"this input carries no current whatever the CTs do" can be told from "the load currents happen
to cancel here" (a residual input in a balanced load). Many states are solved in one batch.

A tapped CT whose winding is joined across anywhere but at the pair in use (a jumper across a
section inside the tap, or across an unused section outside it) is solved as coupled sections
of one core instead (``windings.py``): the shorted turns take their share of the ampere-turns,
so the devices' currents change and the trip rules see it; ``partial_winding_short`` gives the
section currents.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.quantities import PROBE_ZERO_A, Computed, Roles, input_roles
from analysis.engine.topology import components, solve, topology
from analysis.engine.windings import (
    WindingArrays,
    coupled_mask,
    section_currents,
    shorted_sections,
    stamp,
    winding_arrays,
)
from record.operations import operation_key
from siterules.procedure_refs import Problem, RecordNames, default_jumper_id, procedure_problems

# Thresholds of the findings table (design.md), as fractions of the largest CT current of the
# circuit.
CHANGE_FRACTION = 0.10
APPEAR_FROM = 0.01
APPEAR_TO = 0.10
# input_bypassed: the probe current left, as a fraction of the probe current at the start.
BYPASS_NOW = 0.01
# A winding section inside the tap in use is shorted when its current differs from what the
# tap delivers by more than this fraction of the CT's load current.
INSIDE_SHORT_FRACTION = 0.01

_GOLDEN_RAD = math.pi * (3.0 - math.sqrt(5.0))


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


def record_names(nl: Netlist) -> RecordNames:
    """What a procedure on this netlist may name (``siterules.procedure_refs``), built once."""
    hit = nl.cache.get("record_names")
    if hit is None:
        hit = nl.cache["record_names"] = RecordNames(
            terminals=frozenset(nl.index),
            switches={code: sw.positions for code, sw in nl.switches.items()},
            devices=frozenset(nl.devices),
            equipment=frozenset(nl.equipment),
            wires=frozenset(frozenset(w.ends) for w in nl.wires if w.a != w.b),
            links=frozenset(frozenset(k.ends) for k in nl.links if k.a != k.b),
        )
    return hit


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
    problems = procedure_problems(record_names(nl), [op], sequence=False)
    if problems:
        raise ProcedureError.of(
            [replace(p, step=step - 1, at=("steps", step - 1, *p.at[2:])) for p in problems]
        )


def apply_op(
    nl: Netlist, state: State, op: dict[str, Any], step: int
) -> tuple[tuple[State, ...], State]:
    """Carry out one operation: (the states passed on the way, in order; the state after).

    A ``set`` passes, for each move between neighbouring positions, the transition state of
    the switch's transition type, and each position on the way (``Switch.path``: a switch
    with more than two positions moves through them in their recorded order, so a rotary
    switch set from P1 to P3 rests in P2 on the way). Other operations pass no state."""
    validate_op(nl, op, step)
    kind = op_kind(op)
    st = replace(state, override=None)
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
            reached = replace(st, positions=tuple(pos.items()))
            old_c, new_c = sw.closed(here), sw.closed(nxt)
            if sw.transition == "make_before_break":
                during: frozenset[int] | None = old_c | new_c
            elif sw.transition == "simultaneous":
                during = None
            else:  # break_before_make, and any unknown kind (the safe reading)
                during = old_c & new_c
            if during is not None and during != new_c:
                passed.append(replace(cur, override=(sw.code, during)))
            passed.append(reached)
            cur = reached
        return tuple(passed[:-1]), passed[-1]
    if kind == "add_jumper":
        a, b = _pair(op, "add_jumper")
        jid = str(op.get("id") or default_jumper_id(step - 1))
        if any(j[0] == jid for j in st.jumpers):
            raise ProcedureError(f"step {step}: jumper {jid!r} is already in place")
        jumpers = (*st.jumpers, (jid, nl.index[a], nl.index[b]))
        return (), replace(st, jumpers=tuple(sorted(jumpers)))
    if kind == "remove_jumper":
        jid = str(op["remove_jumper"])
        if not any(j[0] == jid for j in st.jumpers):
            placed = ", ".join(j[0] for j in st.jumpers) or "none"
            raise ProcedureError(
                f"step {step}: unknown jumper {jid!r} (jumpers in place: {placed})"
            )
        return (), replace(st, jumpers=tuple(j for j in st.jumpers if j[0] != jid))
    if kind in ("lift", "land"):
        a, b = _pair(op, kind)
        wires, links = _between(nl, a, b)
        if kind == "lift":
            return (), replace(
                st,
                lifted_wires=st.lifted_wires | set(wires),
                lifted_links=st.lifted_links | set(links),
            )
        return (), replace(
            st, lifted_wires=st.lifted_wires - set(wires), lifted_links=st.lifted_links - set(links)
        )
    if kind == "remove_device":
        return (), replace(st, removed=st.removed | {str(op[kind])})
    if kind == "insert_device":
        return (), replace(st, removed=st.removed - {str(op[kind])})
    if kind == "deenergize":
        return (), replace(st, energized=st.energized - {str(op[kind])})
    if kind == "energize":
        return (), replace(st, energized=st.energized | {str(op[kind])})
    return (), st  # note


@dataclass(eq=False)
class _StateBatch:
    """Arrays of a batch of solved states, one row per state."""

    nl: Netlist
    live: np.ndarray
    ct_open: np.ndarray
    ct_circ: np.ndarray
    ct_parts: np.ndarray  # conduction component of each CT's first and second terminal in use
    inp_cur: np.ndarray
    inp_probe: np.ndarray
    inp_circ: np.ndarray
    inp_ref_a: np.ndarray
    out_connected: np.ndarray
    node_circ: np.ndarray
    gnode: np.ndarray
    gpoint: np.ndarray
    windings: WindingArrays
    wind_imp: np.ndarray  # conduction label of each winding terminal, its own winding left out
    wind_joined: np.ndarray  # live tapped CT with terminals other than the pair in use joined
    any_joined: list[bool]  # per state: any such CT
    ends_shorted: np.ndarray  # tapped CT whose lowest and highest terminals are one node
    # row -> (current of each winding section, current each tapped winding delivers at its
    # first terminal): ``windings.section_currents`` for one state, solved on first use
    row_sections: Callable[[int], tuple[np.ndarray, np.ndarray]]
    # What ``readings`` needs to recover the currents of zero-impedance elements: the
    # zero-impedance edges of every state (vertex = row * terminals + terminal), the impedance
    # branches and the solve, and the CT injections at their terminals (load column).
    n_terminals: int = 0
    zero: dict[str, np.ndarray] | None = None
    branches: dict[str, np.ndarray] | None = None
    branch_y: np.ndarray | None = None
    solution: Any = None
    injections: dict[str, np.ndarray] | None = None


class StateEval:
    """What the checks need to know about one solved state (row ``row`` of a batch); the
    per-circuit views are built on first use."""

    __slots__ = ("_b", "_cache", "_row", "state")

    def __init__(self, batch: _StateBatch, row: int, state: State) -> None:
        self._b = batch
        self._row = row
        self.state = state
        self._cache: dict[str, Any] = {}

    def _get(self, name: str) -> Any:
        hit = self._cache.get(name)
        if hit is None:
            hit = self._cache[name] = getattr(self._b, name)[self._row].tolist()
        return hit

    @property
    def live(self) -> list[bool]:
        return self._get("live")

    @property
    def ct_open(self) -> list[bool]:
        return self._get("ct_open")

    @property
    def ct_circ(self) -> list[int]:
        return self._get("ct_circ")

    @property
    def inp_cur(self) -> list[complex]:
        return self._get("inp_cur")

    @property
    def inp_probe(self) -> list[complex]:
        return self._get("inp_probe")

    @property
    def inp_ref_a(self) -> list[float]:
        return self._get("inp_ref_a")

    @property
    def inp_circ(self) -> list[int]:
        return self._get("inp_circ")

    @property
    def out_connected(self) -> list[bool]:
        return self._get("out_connected")

    @property
    def normal_ref(self) -> StateEval:
        """The state with every switch, lead, link, jumper and device as in the normal state
        of the site and this state's primary (energized equipment): what the inputs carry when
        the secondary circuits are as they should be. Solved once per netlist and primary."""
        nl = self._b.nl
        key = ("normal_ref", self.state.energized)
        hit = nl.cache.get(key)
        if hit is None:
            ref = replace(normal_state(nl), energized=self.state.energized)
            hit = self if ref == self.state else evaluate_states(nl, [ref])[0]
            nl.cache[key] = hit
        return hit

    @property
    def live_open(self) -> np.ndarray:
        """Mask of the CTs that are live and open in this state."""
        return self._b.live[self._row] & self._b.ct_open[self._row]

    @property
    def inp_abs(self) -> np.ndarray:
        hit = self._cache.get("inp_abs")
        if hit is None:
            hit = self._cache["inp_abs"] = np.abs(self._b.inp_cur[self._row])
        return hit

    @property
    def circ_id(self) -> dict[int, str]:
        """Circuit label -> circuit id (named after its first CT code)."""
        hit = self._cache.get("circ_id")
        if hit is None:
            cts = self._b.nl.ct_list
            cl = self.ct_circ
            hit = {}
            for k in sorted(range(len(cts)), key=lambda k: cts[k].code):
                hit.setdefault(cl[k], f"CKT-{cts[k].code}")
            self._cache["circ_id"] = hit
        return hit

    @property
    def circ_grounds(self) -> dict[int, list[str]]:
        """Circuit label -> its distinct ground points (one terminal each)."""
        hit = self._cache.get("circ_grounds")
        if hit is None:
            nl = self._b.nl
            hit = {lab: [] for lab in self.circ_id}
            seen: set[int] = set()
            glab = self._b.node_circ[self._b.gnode[self._row]].tolist()
            points = self._b.gpoint[self._row].tolist()
            for g, point, lab in zip(nl.grounds, points, glab, strict=True):
                if lab in hit and point not in seen:
                    seen.add(point)
                    hit[lab].append(nl.terminals[g])
            self._cache["circ_grounds"] = hit
        return hit

    @property
    def partial(self) -> dict[str, list[tuple[str, str, bool]]]:
        """Live CT -> its shorted winding sections (lower terminal, higher terminal, inside
        the tap in use)."""
        hit = self._cache.get("partial")
        if hit is None:
            hit = {}
            b = self._b
            wa = b.windings
            joined = b.wind_joined[self._row]
            for m in np.flatnonzero(joined).tolist() if b.any_joined[self._row] else ():
                c = b.nl.ct_list[int(wa.ct[m])]
                sel = wa.term_m == m
                labels = b.wind_imp[self._row][sel].tolist()
                sec = shorted_sections(wa.names[m], c.positions, c.in_use, labels)
                # Inside the tap, a section is shorted when it carries other than what the
                # tap delivers (a path at a mid-tap terminal that closes through the tap's own
                # burden joins every terminal of the tap; only the sections the path really
                # bypasses carry a different current).
                sec_cur, delivered = self._sections()
                cur = sec_cur[wa.sec_m == m].tolist()
                out_i = delivered[m]
                floor = INSIDE_SHORT_FRACTION * c.load_secondary_a
                k_of = {n: k for k, n in enumerate(wa.names[m])}
                if floor > 0:
                    sec = [
                        (a, bb, inside)
                        for a, bb, inside in sec
                        if not inside or abs(abs(cur[k_of[a]]) - abs(out_i)) > floor
                    ]
                # The whole winding shorted end to end (its lowest and highest terminals
                # joined with no impedance) is a short of the CT, not of part of it.
                if b.ends_shorted[self._row][m]:
                    sec = []
                if sec:
                    hit[c.code] = sec
            self._cache["partial"] = hit
        return hit

    def _sections(self) -> tuple[np.ndarray, np.ndarray]:
        hit = self._cache.get("sections")
        if hit is None:
            hit = self._cache["sections"] = self._b.row_sections(self._row)
        return hit

    def sections(self, ct_code: str) -> list[tuple[str, str, float, complex]]:
        """The sections of a tapped CT's winding in this state: (lower terminal, higher
        terminal, turns, current leaving the winding at the lower terminal, A). The
        single-source values (the tap current in the tap's sections, 0 elsewhere) unless part
        of the winding is joined across (``windings.py``)."""
        b = self._b
        wa = b.windings
        ct = b.nl.cts[ct_code]
        hits = np.flatnonzero(wa.ct == ct.index)
        if not len(hits):
            return []
        m = int(hits[0])
        sel = np.flatnonzero(wa.sec_m == m)
        names = wa.names[m]
        cur = self._sections()[0][sel].tolist()
        turns = wa.sec_turns[sel].tolist()
        return [(names[k], names[k + 1], turns[k], cur[k]) for k in range(len(sel))]

    def delivered(self, ct_code: str) -> complex | None:
        """Current a tapped CT's winding delivers into the node of its first terminal in use
        (the load current where no part of its winding is joined across); None for a CT with
        two terminals."""
        b = self._b
        hits = np.flatnonzero(b.windings.ct == b.nl.cts[ct_code].index)
        return complex(self._sections()[1][int(hits[0])]) if len(hits) else None


def _cached_row(nl: Netlist, key: tuple[Any, ...], make: Any) -> np.ndarray:
    row = nl.cache.get(key)
    if row is None:
        row = make()
        if len(nl.cache) < 50_000:
            nl.cache[key] = row
    return row


def _contact_table(nl: Netlist) -> tuple[np.ndarray, np.ndarray, list[dict[str, int]]]:
    """(switch of each contact, closed[contact, position index], position index per switch)."""
    hit = nl.cache.get("contact_table")
    if hit is None:
        sws = list(nl.switches.values())
        width = max((len(sw.positions) for sw in sws), default=1)
        owner = np.zeros(len(nl.contacts), dtype=np.int64)
        tab = np.zeros((len(nl.contacts), width), dtype=bool)
        for k, sw in enumerate(sws):
            for c in sw.contacts:
                owner[c.index] = k
                for m, pos in enumerate(sw.positions):
                    tab[c.index, m] = pos in c.closed_in
        pos_index = [{p: m for m, p in enumerate(sw.positions)} for sw in sws]
        hit = nl.cache["contact_table"] = (owner, tab, pos_index)
    return hit


def _contact_row(nl: Netlist, st: State) -> np.ndarray:
    def make() -> np.ndarray:
        owner, tab, pos_index = _contact_table(nl)
        pidx = np.fromiter(
            (pos_index[k][p] for k, (_, p) in enumerate(st.positions)),
            dtype=np.int64,
            count=len(st.positions),
        )
        row = tab[np.arange(len(owner)), pidx[owner]] if len(owner) else np.zeros(0, bool)
        if st.override is not None:
            sw = nl.switches[st.override[0]]
            idx = [c.index for c in sw.contacts]
            row[idx] = [c.index in st.override[1] for c in sw.contacts]
        return row

    return _cached_row(nl, ("contacts", st.positions, st.override), make)


def _link_row(nl: Netlist, st: State) -> np.ndarray:
    def make() -> np.ndarray:
        row = np.ones(len(nl.links), dtype=bool)
        row[list(st.lifted_links)] = False
        return row

    return _cached_row(nl, ("links", st.lifted_links), make)


def _branch_row(nl: Netlist, st: State) -> np.ndarray:
    def make() -> np.ndarray:
        row = np.ones(len(nl.arrays.br_z), dtype=bool)
        row[list(st.lifted_wires)] = False
        for code in st.removed:
            dev = nl.devices.get(code)
            if dev is not None:
                row[[nl.arrays.n_wires + i.index for i in dev.inputs]] = False
        return row

    return _cached_row(nl, ("branches", st.lifted_wires, st.removed), make)


def _live_row(nl: Netlist, st: State) -> np.ndarray:
    def make() -> np.ndarray:
        return np.fromiter(
            (
                c.equipment is None
                or c.equipment not in nl.equipment
                or c.equipment in st.energized
                for c in nl.ct_list
            ),
            dtype=bool,
            count=len(nl.ct_list),
        )

    return _cached_row(nl, ("live", st.energized), make)


def evaluate_states(nl: Netlist, states: list[State]) -> list[StateEval]:
    """Solve every state in one batch (each state is a disjoint copy of the netlist)."""
    if not states:
        return []
    n_states = len(states)
    n_t = nl.n_terminals
    ar = nl.arrays
    cts = nl.ct_list
    n_ct = len(cts)
    offs = np.arange(n_states, dtype=np.int64) * n_t

    # One row per state of: contacts closed, links in place, branches in place, CTs live,
    # inputs in place (each row cached on the netlist by the part of the state it depends on).
    cmask = np.stack([_contact_row(nl, st) for st in states])
    lmask = np.stack([_link_row(nl, st) for st in states])
    bmask = np.stack([_branch_row(nl, st) for st in states])
    live = np.stack([_live_row(nl, st) for st in states])
    inp_active = bmask[:, ar.n_wires :]
    sc, cc = np.nonzero(cmask)
    sl, lk = np.nonzero(lmask)
    sz, zz = np.nonzero(bmask & ar.br_zero)
    sb, br_index = np.nonzero(bmask & ~ar.br_zero)
    jumps = [(s, j[1], j[2]) for s, st in enumerate(states) for j in st.jumpers]
    js = np.asarray([j[0] for j in jumps], dtype=np.int64)
    ja = np.asarray([j[1] for j in jumps], dtype=np.int64)
    jb = np.asarray([j[2] for j in jumps], dtype=np.int64)
    za = [
        ar.contact_a[cc] + offs[sc],
        ar.link_a[lk] + offs[sl],
        ar.br_a[zz] + offs[sz],
        ja + offs[js],
    ]
    zb = [
        ar.contact_b[cc] + offs[sc],
        ar.link_b[lk] + offs[sl],
        ar.br_b[zz] + offs[sz],
        jb + offs[js],
    ]
    ba = [ar.br_a[br_index] + offs[sb]]
    bb = [ar.br_b[br_index] + offs[sb]]

    br_y = 1.0 / ar.br_z[br_index]
    wind_a = (ar.wind_a[None, :] + offs[:, None]).ravel()
    wind_b = (ar.wind_b[None, :] + offs[:, None]).ravel()
    gv = (ar.grounds[None, :] + offs[:, None]).ravel()
    topo = topology(
        n_states * n_t,
        np.concatenate(za),
        np.concatenate(zb),
        ba[0],
        bb[0],
        wind_a,
        wind_b,
        gv,
    )
    tn = topo.term_node
    f = tn[ar.ct_first[None, :] + offs[:, None]]
    s2 = tn[ar.ct_second[None, :] + offs[:, None]]
    ct_open = topo.node_imp[f] != topo.node_imp[s2]
    ct_circ = topo.node_circ[f]
    load = np.broadcast_to(ar.ct_load, (n_states, n_ct))

    # Tapped windings joined across other than at the pair in use are solved as coupled
    # sections (windings.py); every other CT stays an ideal source across its tap.
    wa = winding_arrays(nl)

    def node_of(rows: np.ndarray, terms: np.ndarray) -> np.ndarray:
        return tn[terms + offs[rows]]

    wind_imp = topo.node_imp[tn[wa.term[None, :] + offs[:, None]]]
    coupled = coupled_mask(wa, wind_imp)
    solve_topo, solve_y = topo, br_y
    if wa.n:
        solve_topo, solve_y, coupled, wind_imp = _coupled_windings(
            topo, br_y, wa, coupled, ct_open[:, wa.ct], ar, node_of, offs
        )
    cr, cm = np.nonzero(coupled)
    ct_coupled = np.zeros((n_states, n_ct), dtype=bool)
    ct_coupled[cr, wa.ct[cm]] = True
    inj = live & (~ct_open | ct_coupled)
    fn, sn = f, s2
    mult = np.ones((n_states, n_ct))
    if len(cm):
        fn, sn = f.copy(), s2.copy()
        fn[cr, wa.ct[cm]] = node_of(cr, wa.src[cm])
        sn[cr, wa.ct[cm]] = node_of(cr, wa.snk[cm])
        mult[cr, wa.ct[cm]] = wa.scale[cm]
    probe = np.exp(1j * (0.5 + _GOLDEN_RAD * np.arange(n_ct)))
    pr = np.broadcast_to(probe, (n_states, n_ct))
    fi, si = fn[inj], sn[inj]
    li, pi = load[inj] * mult[inj], pr[inj] * mult[inj]
    inj_node = np.concatenate([fi, si, fi, si])
    zeros = np.zeros(len(fi), dtype=np.int64)
    inj_col = np.concatenate([zeros, zeros, zeros + 1, zeros + 1])
    inj_val = np.concatenate([li, -li, pi, -pi])
    ncols = np.zeros(topo.n_circ, dtype=np.int64)
    ncols[ct_circ[inj]] = 2
    sol = solve(solve_topo, solve_y, inj_node, inj_col, inj_val, ncols)

    all_sections: list[tuple[np.ndarray, np.ndarray]] = []

    def row_sections(row: int) -> tuple[np.ndarray, np.ndarray]:
        # every state at once on the first request (one vectorized pass), then by row
        if not all_sections:
            lv, cts = live[:, wa.ct], wa.ct
            all_sections.append(
                section_currents(
                    wa,
                    coupled,
                    np.where(lv & coupled, load[:, cts] * wa.scale[None, :], 0.0),
                    lambda a, b: sol.dv(a, b, 0),
                    node_of,
                    np.where(lv & ~ct_open[:, cts], load[:, cts] * wa.sign[None, :], 0.0),
                )
            )
        cur, out = all_sections[0]
        return cur[row], out[row]

    # device input currents, both columns
    n_in = len(nl.inputs)
    ia = tn[(np.asarray([i.a for i in nl.inputs], dtype=np.int64)[None, :] + offs[:, None])]
    ib = tn[(np.asarray([i.b for i in nl.inputs], dtype=np.int64)[None, :] + offs[:, None])]
    y_in = 1.0 / ar.br_z[ar.n_wires :]
    cur = (sol.dv(ia, ib, 0) * y_in) * inp_active
    prb = (sol.dv(ia, ib, 1) * y_in) * inp_active
    inp_circ = topo.node_circ[ia] if n_in else np.zeros((n_states, 0), dtype=np.int64)

    # trip paths: zero-impedance elements and wires (not device inputs, not ground)
    is_wire = br_index < ar.n_wires
    tl = components(topo.n_nodes, topo.br_na[is_wire], topo.br_nb[is_wire])
    ot = tl[tn[ar.out_terminal[None, :] + offs[:, None]]]
    og = tl[tn[ar.out_target[None, :] + offs[:, None]]]
    out_conn = ot == og

    # largest live CT load current of each circuit, for the thresholds of the findings table
    ref = np.zeros(topo.n_circ + 1)
    if n_ct:
        np.maximum.at(ref, ct_circ[live], np.broadcast_to(np.abs(ar.ct_load), live.shape)[live])
    batch = _StateBatch(
        nl=nl,
        live=live,
        ct_open=ct_open,
        ct_circ=ct_circ,
        ct_parts=np.stack([topo.node_imp[f], topo.node_imp[s2]], axis=-1),
        inp_cur=cur,
        inp_probe=prb,
        inp_circ=inp_circ,
        inp_ref_a=ref[inp_circ],
        out_connected=out_conn,
        node_circ=topo.node_circ,
        gnode=tn[gv].reshape(n_states, len(ar.grounds)),
        gpoint=topo.term_point[gv].reshape(n_states, len(ar.grounds)),
        windings=wa,
        wind_imp=wind_imp,
        wind_joined=coupled & live[:, wa.ct],
        any_joined=(coupled & live[:, wa.ct]).any(axis=1).tolist(),
        ends_shorted=topo.term_point[wa.src[None, :] + offs[:, None]]
        == topo.term_point[wa.snk[None, :] + offs[:, None]],
        row_sections=row_sections,
    )
    n_z = [len(x) for x in za]
    batch.n_terminals = n_t
    batch.zero = {
        "a": np.concatenate(za),
        "b": np.concatenate(zb),
        # element of each edge: 0 contact, 1 link, 2 zero-impedance branch, 3 jumper (its
        # place in its state's ``jumpers``)
        "kind": np.repeat(np.arange(4), n_z),
        "elem": np.concatenate(
            [cc, lk, zz, np.asarray([k for st in states for k in range(len(st.jumpers))], int)]
        ),
        "row": np.concatenate([sc, sl, sz, js]),
    }
    batch.branches = {"row": sb, "a": ba[0], "b": bb[0], "na": topo.br_na, "nb": topo.br_nb}
    batch.branch_y = br_y
    batch.solution = sol
    # two-terminal CTs inject their load at their terminals in use; a tapped winding's
    # currents at its terminals come from its section currents (``row_sections``)
    plain = live & ~ct_open
    if wa.n:
        plain[:, wa.ct] = False
    first_v = (ar.ct_first[None, :] + offs[:, None])[plain]
    second_v = (ar.ct_second[None, :] + offs[:, None])[plain]
    inj_row = np.nonzero(plain)[0]
    batch.injections = {
        "row": np.concatenate([inj_row, inj_row]),
        "term": np.concatenate([first_v, second_v]),
        "cur": np.concatenate([load[plain], -load[plain]]),
    }
    return [StateEval(batch, s, st) for s, st in enumerate(states)]


def _coupled_windings(
    topo: Any,
    br_y: np.ndarray,
    wa: WindingArrays,
    joined: np.ndarray,
    open_tap: np.ndarray,
    ar: Any,
    node_of: Any,
    offs: np.ndarray,
) -> tuple[Any, np.ndarray, np.ndarray, np.ndarray]:
    """Which tapped windings to solve as coupled sections, and the solve's topology with their
    branches: (topology, branch admittances, coupled mask: states × tapped CTs, conduction label
    of each winding terminal as the rest of the network joins them: external paths, and for a
    winding joined only through others, those windings too).

    A winding must be coupled when a pair of its terminals other than the pair in use is joined
    by the rest of the network: external paths (``joined``), or paths through other coupled
    windings, which conduct between all their terminals. That is a fixed point: two CTs whose
    unused taps are wired to each other (with their taps closed) are each joined only through
    the other, and both are coupled: the EMFs of their unused sections drive a current round
    the loop. So: start from every tapped winding whose tap is closed and that has a terminal
    other than the pair in use wired to anything, and drop those that no other candidate joins
    across, until none drops. A winding whose tap is open is coupled only by external paths
    (it is reported open either way, and a loop of open windings has no solution)."""
    tn = topo.term_node
    wnodes = tn[wa.term[None, :] + offs[:, None]]
    cand = joined.copy()
    in_use = (wa.term == ar.ct_first[wa.ct][wa.term_m]) | (
        wa.term == ar.ct_second[wa.ct][wa.term_m]
    )
    per_node = np.bincount(tn, minlength=topo.n_nodes)
    degree = np.bincount(topo.br_na, minlength=topo.n_nodes) + np.bincount(
        topo.br_nb, minlength=topo.n_nodes
    )
    wired = ((per_node[wnodes] > 1) | (degree[wnodes] > 0)) & ~in_use[None, :]
    rows, cols = np.nonzero(wired)
    cand[rows, wa.term_m[cols]] |= ~open_tap[rows, wa.term_m[cols]]
    unsure = cand & ~joined
    labels = topo.node_imp[wnodes]
    changed = unsure.any()
    while changed:
        changed = False
        for m in np.unique(np.nonzero(unsure)[1]).tolist():
            others = cand.copy()
            others[:, m] = False
            st = stamp(wa, others, node_of)
            imp = components(
                topo.n_nodes,
                np.concatenate([topo.br_na, st.na]),
                np.concatenate([topo.br_nb, st.nb]),
            )
            seen = imp[wnodes]
            keep = coupled_mask(wa, seen)[:, m]
            own = wa.term_m == m
            labels[:, own] = np.where(unsure[:, m : m + 1], seen[:, own], labels[:, own])
            drop = cand[:, m] & ~keep
            if drop.any():
                cand[:, m] &= keep
                unsure[:, m] &= keep
                changed = True
    if not cand.any():
        return topo, br_y, cand, labels
    st = stamp(wa, cand, node_of)
    na = np.concatenate([topo.br_na, st.na])
    nb = np.concatenate([topo.br_nb, st.nb])
    return (
        replace(topo, br_na=na, br_nb=nb, node_imp=components(topo.n_nodes, na, nb)),
        np.concatenate([br_y, st.y]),
        cand,
        labels,
    )


# ---------------------------------------------------------------------------------------------
# checks


def _fmt_a(x: float) -> str:
    if x < 1e-6:
        return "0 A"
    return f"{x:.3g} A" if x < 0.01 else f"{x:.2f} A"


def _ground_fault_secondary(nl: Netlist, ct: Any) -> tuple[float, str, float] | None:
    """(bus ground-fault kA, bus code, secondary A through the tap in use) for the CT's
    equipment, from the site record; None where the record does not say."""
    record = nl.record
    if record is None or ct.tap_primary_a <= 0:
        return None
    eq = next((e for e in record.equipment if e.code == ct.equipment), None)
    if eq is None or not eq.bus:
        return None
    bus = next((b for b in record.buses if b.code == eq.bus), None)
    ka = None if bus is None else bus.ground_fault_ka
    if ka is None or ka <= 0:
        return None
    return float(ka), eq.bus, float(ka) * 1000.0 * ct.secondary_a / ct.tap_primary_a


def _fault_text(nl: Netlist, ct: Any) -> tuple[str, float | None]:
    gf = _ground_fault_secondary(nl, ct)
    if gf is None:
        return "the ground-fault current through its ratio (no bus fault level recorded)", None
    ka, bus, sec = gf
    return f"{_fmt_a(sec)} secondary for {bus}'s {ka:g} kA ground fault at {ct.ratio_text}", sec


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
    if not ev.live_open.any():
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


def input_roles_of(nl: Netlist) -> Roles:
    """``quantities.input_roles`` of the netlist, from its reference solve (every switch,
    lead and link normal, every piece of equipment energized); cached on the netlist."""
    hit = nl.cache.get("input_roles")
    if hit is None:
        ref = replace(normal_state(nl), energized=frozenset(nl.equipment))
        # usually the normal state itself, already solved by the procedure or plan
        ev = nl.cache.get(("normal_ref", ref.energized)) or evaluate_states(nl, [ref])[0]
        b, r = ev._b, ev._row
        hit = input_roles(nl, b.inp_cur[r], b.inp_probe[r], b.inp_ref_a[r], b.inp_circ[r])
        nl.cache["input_roles"] = hit
    return hit


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
    out = []
    roles: Roles | None = None
    for dev in nl.devices.values():
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
    di, i_now, i_norm, ref, others = hit
    outs = ", ".join(
        f"{o.name} ({nl.terminals[o.terminal]} → {nl.terminals[o.target]})" for o in new
    )
    also = f" (and {', '.join(sorted(others))})" if others else ""
    return Finding(
        code=fc.TRIP_NOT_ISOLATED,
        message=(
            f"{dev.code} output {outs} is reconnected while input {di.name}{also} carries "
            f"{_fmt_a(abs(i_now))} against {_fmt_a(abs(i_norm))} with the CT circuits in their "
            f"normal state (more than 10 % of the circuit's largest CT current, "
            f"{_fmt_a(ref)}, apart): restore the CT circuits before the trips"
        ),
        device=dev.code,
        input=di.name,
        circuit=ev.circ_id.get(ev.inp_circ[di.index]),
        stage=stage,
        numbers={
            "now_a": round(abs(i_now), 4),
            "normal_a": round(abs(i_norm), 4),
            "circuit_max_a": round(ref, 4),
            "outputs": [o.name for o in new],
        },
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
    di, i_now, i_norm, ref, others = hit
    what = ", ".join(sorted(added))
    outs = ", ".join(
        f"{o.name} ({nl.terminals[o.terminal]} → {nl.terminals[o.target]})" for o in conn
    )
    also = f" (and {', '.join(sorted(others))})" if others else ""
    return Finding(
        code=fc.TRIP_NOT_ISOLATED,
        message=(
            f"{what} is energized while {dev.code} output {outs} is connected and input "
            f"{di.name}{also} carries {_fmt_a(abs(i_now))} against {_fmt_a(abs(i_norm))} with "
            f"the CT circuits in their normal state (more than 10 % of the circuit's largest CT "
            f"current, {_fmt_a(ref)}, apart): isolate the trips or restore the CT circuits "
            f"before energizing"
        ),
        device=dev.code,
        input=di.name,
        circuit=ev.circ_id.get(ev.inp_circ[di.index]),
        stage=stage,
        numbers={
            "now_a": round(abs(i_now), 4),
            "normal_a": round(abs(i_norm), 4),
            "circuit_max_a": round(ref, 4),
            "outputs": [o.name for o in conn],
            "energized": sorted(added),
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


def _bypass_base(nl: Netlist, base: StateEval) -> dict[str, Any]:
    """What ``check_bypassed`` needs of the starting state, computed once per starting state:
    the probe current of each input, the CTs that fed it (live, closed and in its circuit)
    and the finding keys; ``lost`` is added per solved batch by ``check_bypassed``."""
    hit = base._cache.get("bypass")
    if hit is None:
        b, r = base._b, base._row
        probe0 = np.abs(b.inp_probe[r])
        feeders = (
            (b.inp_circ[r][:, None] == b.ct_circ[r][None, :])
            & b.live[r][None, :]
            & ~b.ct_open[r][None, :]
        )
        hit = base._cache["bypass"] = {
            "fed": probe0 >= PROBE_ZERO_A,
            "limit": BYPASS_NOW * probe0,
            "feeders": feeders,
            "keys": [
                (fc.INPUT_BYPASSED, None, di.device, di.name, base.circ_id.get(base.inp_circ[k]))
                for k, di in enumerate(nl.inputs)
            ],
        }
    return hit


def check_bypassed(
    nl: Netlist,
    base: StateEval,
    ev: StateEval,
    stage: str | None,
    skip: set[tuple[Any, ...]] | None = None,
    keys: set[tuple[Any, ...]] | None = None,
) -> list[Finding]:
    """``input_bypassed``: an input that could see the current of its CTs in the starting
    state can no longer see it: the probe column (every live CT injects a test current at its
    own angle) drives under 1 % of what it drove through the input at the start. This names
    the inputs that carry load and also the residual, neutral and differential inputs that
    carry about 0 A in normal service and the fault current in a fault. An input none of
    whose CTs (live, closed and in its circuit at the start) is still live and closed is not
    bypassed: de-energizing the equipment is no loss of protection. Nor is an input while one
    of those CTs is live and open: that is ``open_secondary``, and the input's currents are
    not what they will be once it is closed. (``keys`` collects the key of every finding that
    holds; no finding is built for a key in ``skip``.)"""
    out: list[Finding] = []
    bb = _bypass_base(nl, base)
    b = ev._b
    batch_hit = bb.get("lost")
    if batch_hit is None or batch_hit[0] is not b:
        # every state of the batch at once: (states × inputs)
        lost = bb["fed"][None, :] & (np.abs(b.inp_probe) < bb["limit"][None, :])
        if lost.any():
            feeders = bb["feeders"].T.astype(np.int32)
            closed_feeders = (b.live & ~b.ct_open).astype(np.int32) @ feeders
            open_feeders = (b.live & b.ct_open).astype(np.int32) @ feeders
            lost &= (closed_feeders > 0) & (open_feeders == 0)
        batch_hit = bb["lost"] = (b, lost)
    row = batch_hit[1][ev._row]
    if not row.any():
        return out
    hits = np.flatnonzero(row).tolist()
    roles = input_roles_of(nl)
    for k in hits:
        key = bb["keys"][k]
        if keys is not None:
            keys.add(key)
        if skip is not None and key in skip:
            continue
        di = nl.inputs[k]
        i0, i1 = abs(base.inp_cur[k]), abs(ev.inp_cur[k])
        cid = key[4]
        dev = nl.devices[di.device]
        lost_f = roles.functions_lost(k)
        funcs = "/".join(lost_f) or dev.kind
        how = "is removed" if di.device in ev.state.removed else "is bypassed"
        if roles.quiet[k]:
            seen = (
                f"it carried {_fmt_a(i0)} (about 0 A in normal service, as a residual, neutral "
                f"or differential input does; a fault drives current through it) and now no "
                f"current of its CTs reaches it"
            )
        else:
            seen = f"it carried {_fmt_a(i0)} and now carries {_fmt_a(i1)}"
        out.append(
            Finding(
                code=fc.INPUT_BYPASSED,
                message=f"{dev.code} input {di.name} {how}: {seen}; functions {funcs} lose "
                f"their current",
                device=dev.code,
                input=di.name,
                circuit=cid,
                stage=stage,
                numbers={
                    "from_a": round(i0, 4),
                    "to_a": round(i1, 4),
                    "functions": list(lost_f),
                },
            )
        )
    return out


def check_partial(nl: Netlist, ev: StateEval, stage: str | None) -> list[Finding]:
    """``partial_winding_short``: a section of a live CT's winding is shorted, inside or outside
    the tap in use. The message gives each shorted section's current and what the tap now
    delivers against its load current (the winding solved as coupled sections of one core,
    ``windings.py``): the devices' currents change with it, which the trip rules see."""
    out = []
    for code, sections in ev.partial.items():
        ct = nl.cts[code]
        cur = {(a, b): (t, i) for a, b, t, i in ev.sections(code)}
        parts = []
        section_a = []
        for a, b, inside in sections:
            turns, i = cur[(a, b)]
            section_a.append(round(abs(i), 4))
            parts.append(
                f"{a}-{b} ({ct.positions[a]:g}-{ct.positions[b]:g} A, {turns:g} turns, "
                f"{'inside' if inside else 'outside'} the tap in use) carries {_fmt_a(abs(i))}"
            )
        delivered = ev.delivered(code)
        now = abs(delivered) if delivered is not None else 0.0
        ideal = ct.load_secondary_a
        if ev.ct_open[ct.index]:
            tail = "; the tap in use is open"
        elif ideal <= 0:
            tail = f"; the tap in use delivers {_fmt_a(now)} (no load recorded)"
        else:
            tail = (
                f"; the tap in use delivers {_fmt_a(now)} instead of {_fmt_a(ideal)} "
                f"({now / ideal * 100:.0f} %: the shorted turns take a share of the core's "
                f"ampere-turns)"
            )
        out.append(
            Finding(
                code=fc.PARTIAL_WINDING_SHORT,
                message=(
                    f"CT {code} ({ct.ratio_text}, tap {ct.in_use[0]}-{ct.in_use[1]}) has "
                    f"winding section{'s' if len(parts) > 1 else ''} shorted: "
                    f"{'; '.join(parts)}{tail}"
                ),
                ct=code,
                circuit=ev.circ_id.get(ev.ct_circ[ct.index]),
                stage=stage,
                numbers={
                    "sections": [[a, b] for a, b, _ in sections],
                    "inside_tap": [inside for _, _, inside in sections],
                    "section_a": section_a,
                    "delivered_a": round(now, 4),
                    "load_a": round(ideal, 4),
                },
            )
        )
    return out


def check_grounds(nl: Netlist, ev: StateEval, stage: str | None) -> list[Finding]:
    """``no_ground`` / ``multiple_grounds``: one ground point per secondary circuit."""
    out = []
    for lab, cid in ev.circ_id.items():
        pts = ev.circ_grounds.get(lab, [])
        if not pts:
            out.append(
                Finding(
                    code=fc.NO_GROUND,
                    message=f"circuit {cid} has no ground point",
                    circuit=cid,
                    stage=stage,
                    numbers={"ground_points": 0},
                )
            )
        elif len(pts) > 1:
            out.append(
                Finding(
                    code=fc.MULTIPLE_GROUNDS,
                    message=(
                        f"circuit {cid} is grounded at {len(pts)} points "
                        f"({', '.join(pts)}); it should be grounded at one"
                    ),
                    circuit=cid,
                    stage=stage,
                    numbers={"ground_points": len(pts)},
                )
            )
    return out


def state_findings(
    nl: Netlist,
    base: StateEval,
    before: StateEval,
    ev: StateEval,
    work: frozenset[str],
    stage: str | None,
    skip: set[tuple[Any, ...]] | None = None,
    keys: set[tuple[Any, ...]] | None = None,
) -> list[Finding]:
    """Every state check of the findings table for ``ev`` (compared with ``before`` for the
    trip rules and with ``base``, the starting state, for bypassed inputs).

    ``keys`` (if given) collects the key of every finding that holds; findings other than
    ``open_secondary`` and ``trip_not_isolated`` whose key is in ``skip`` are left out."""
    out = [
        *check_open_secondary(nl, ev, stage),
        *check_trip(nl, before, ev, work, stage),
        *check_bypassed(nl, base, ev, stage, skip, keys),
    ]
    for f in (*check_partial(nl, ev, stage), *check_grounds(nl, ev, stage)):
        key = finding_key(f)
        if keys is not None:
            keys.add(key)
        if skip is None or key not in skip:
            out.append(f)
    if keys is not None:
        keys.update(finding_key(f) for f in out)
    return out


ALWAYS_REPORTED = frozenset({fc.OPEN_SECONDARY, fc.TRIP_NOT_ISOLATED})


def finding_key(f: Finding) -> tuple[Any, ...]:
    """What makes two findings of different states "the same" for the reporting rule."""
    return (f.code, f.ct, f.device, f.input, f.circuit)
