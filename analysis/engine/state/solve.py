"""The batched state solve: many circuit states of one netlist in one nodal solve, and
``StateEval``, what the finding rules read of one solved state.

Currents in a state come from one nodal solve (``topology.solve``): each live CT injects its
load current (equipment maximum load / ratio; 1 A where unknown) at its phase angle (A 0°,
B −120°, C +120°). A second, *probe* column injects unit currents at unrelated angles so that
"this input carries no current whatever the CTs do" can be told from "the load currents happen
to cancel here" (a residual input in a balanced load). Many states are solved in one batch,
each a disjoint copy of the netlist.

A tapped CT whose winding is joined across anywhere but at the pair in use (a jumper across a
section inside the tap, or across an unused section outside it) is solved as coupled sections
of one core instead (``windings.py``): the shorted turns take their share of the ampere-turns,
so the devices' currents change and the trip rules see it; ``partial_winding_short`` gives the
section currents.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from analysis.engine.netlist import Netlist
from analysis.engine.state.operations import State, normal_state
from analysis.engine.topology import components, solve, topology
from analysis.engine.windings import (
    Stamp,
    WindingArrays,
    coupled_mask,
    section_currents,
    shorted_sections,
    stamp,
    winding_arrays,
)

# A winding section inside the tap in use is shorted when its current differs from what the
# tap delivers by more than this fraction of the CT's load current.
INSIDE_SHORT_FRACTION = 0.01

_GOLDEN_RAD = math.pi * (3.0 - math.sqrt(5.0))


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
    # the same for every state at once (states × sections, states × tapped CTs)
    sections_all: Callable[[bool], tuple[np.ndarray, np.ndarray]]
    # What ``readings`` needs to recover the currents of zero-impedance elements: the
    # zero-impedance edges of every state (vertex = row * terminals + terminal), the impedance
    # branches and the solve, and the CT injections at their terminals (load column).
    n_terminals: int = 0
    zero: dict[str, np.ndarray] | None = None
    branches: dict[str, np.ndarray] | None = None
    branch_y: np.ndarray | None = None
    solution: Any = None
    injections: dict[str, np.ndarray] | None = None
    # what the rules and readings work out once for every state of the batch
    cache: dict[str, Any] = field(default_factory=dict)


class StateEval:
    """What the checks need to know about one solved state (row ``row`` of a batch); the
    per-circuit views are built on first use."""

    __slots__ = ("_b", "_cache", "_row", "_slot", "state")

    def __init__(self, batch: _StateBatch, row: int, state: State, slot: int | None = None) -> None:
        self._b = batch
        self._row = row
        # the state's place in the list its batch was asked to solve (a state asked twice is
        # solved once: one row, two slots)
        self._slot = row if slot is None else slot
        self.state = state
        self._cache: dict[str, Any] = {}

    def _get(self, name: str) -> Any:
        # every state's row of the batch array as Python values, converted once per batch
        rows = self._b.cache.get(name)
        if rows is None:
            rows = self._b.cache[name] = getattr(self._b, name).tolist()
        return rows[self._row]

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
    def any_output_connected(self) -> bool:
        """Whether any trip/close output is connected to its target in this state."""
        rows: list[bool] | None = self._b.cache.get("out_any")
        if rows is None:
            flags: np.ndarray = np.any(self._b.out_connected, axis=1)
            rows = self._b.cache["out_any"] = flags.tolist()
        return rows[self._row]

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
    def any_live_open(self) -> bool:
        """Whether any CT is live and open in this state."""
        rows: list[bool] | None = self._b.cache.get("live_open_any")
        if rows is None:
            flags: np.ndarray = np.any(self._b.live & self._b.ct_open, axis=1)
            rows = self._b.cache["live_open_any"] = flags.tolist()
        return rows[self._row]

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
            cl = self.ct_circ
            hit = {}
            for k, cid in _circuit_names(self._b.nl):
                hit.setdefault(cl[k], cid)
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


def _circuit_names(nl: Netlist) -> list[tuple[int, str]]:
    """(CT index, the id of a circuit named after it) of every CT in code order: a circuit is
    named after its first CT by code (cached)."""
    hit = nl.cache.get("circuit_names")
    if hit is None:
        cts = nl.ct_list
        hit = nl.cache["circuit_names"] = [
            (k, f"CKT-{cts[k].code}") for k in sorted(range(len(cts)), key=lambda k: cts[k].code)
        ]
    return hit


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
        owner_l = [0] * len(nl.contacts)
        rows: list[list[bool]] = [[False] * width for _ in nl.contacts]
        for k, sw in enumerate(sws):
            for c in sw.contacts:
                owner_l[c.index] = k
                rows[c.index][: len(sw.positions)] = [p in c.closed_in for p in sw.positions]
        owner = np.asarray(owner_l, dtype=np.int64)
        tab = np.asarray(rows, dtype=bool).reshape(len(nl.contacts), width)
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


@dataclass(eq=False)
class _Group:
    """One netlist's states inside a batch: their masks and element edges, local vertex
    numbering (vertex = row · terminals + terminal) and ``base``, the batch vertex of the
    group's first one."""

    nl: Netlist
    states: list[State]
    base: int
    offs: np.ndarray  # local vertex of each state's terminal 0
    live: np.ndarray
    inp_active: np.ndarray
    za: list[np.ndarray]
    zb: list[np.ndarray]
    zrow: list[np.ndarray]
    zelem: list[np.ndarray]
    sb: np.ndarray
    ba: np.ndarray
    bb: np.ndarray
    br_y: np.ndarray
    is_wire: np.ndarray

    @property
    def n_vertices(self) -> int:
        return len(self.states) * self.nl.n_terminals


def _group(nl: Netlist, states: list[State], base: int) -> _Group:
    """The masks and element edges of ``states`` (one row each; rows cached on the netlist
    by the part of the state they depend on)."""
    ar = nl.arrays
    offs = np.arange(len(states), dtype=np.int64) * nl.n_terminals
    cmask = np.stack([_contact_row(nl, st) for st in states])
    lmask = np.stack([_link_row(nl, st) for st in states])
    bmask = np.stack([_branch_row(nl, st) for st in states])
    live = np.stack([_live_row(nl, st) for st in states])
    sc, cc = np.nonzero(cmask)
    sl, lk = np.nonzero(lmask)
    sz, zz = np.nonzero(bmask & ar.br_zero)
    sb, br_index = np.nonzero(bmask & ~ar.br_zero)
    jumps = [(s, j[1], j[2]) for s, st in enumerate(states) for j in st.jumpers]
    js = np.asarray([j[0] for j in jumps], dtype=np.int64)
    ja = np.asarray([j[1] for j in jumps], dtype=np.int64)
    jb = np.asarray([j[2] for j in jumps], dtype=np.int64)
    return _Group(
        nl=nl,
        states=states,
        base=base,
        offs=offs,
        live=live,
        inp_active=bmask[:, ar.n_wires :],
        za=[
            ar.contact_a[cc] + offs[sc],
            ar.link_a[lk] + offs[sl],
            ar.br_a[zz] + offs[sz],
            ja + offs[js],
        ],
        zb=[
            ar.contact_b[cc] + offs[sc],
            ar.link_b[lk] + offs[sl],
            ar.br_b[zz] + offs[sz],
            jb + offs[js],
        ],
        zrow=[sc, sl, sz, js],
        # element of each edge: 0 contact, 1 link, 2 zero-impedance branch, 3 jumper (its
        # place in its state's ``jumpers``)
        zelem=[
            cc,
            lk,
            zz,
            np.asarray([k for st in states for k in range(len(st.jumpers))], dtype=np.int64),
        ],
        sb=sb,
        ba=ar.br_a[br_index] + offs[sb],
        bb=ar.br_b[br_index] + offs[sb],
        br_y=1.0 / ar.br_z[br_index],
        is_wire=br_index < ar.n_wires,
    )


def evaluate_states(nl: Netlist, states: list[State]) -> list[StateEval]:
    """Solve every state in one batch (each state is a disjoint copy of the netlist)."""
    if not states:
        return []
    return evaluate_groups([(nl, states)])[0]


def evaluate_groups(groups: Sequence[tuple[Netlist, Sequence[State]]]) -> list[list[StateEval]]:
    """Solve the states of several netlists (the regions of a site's procedures, say) in one
    batch: every state is a disjoint copy of its netlist, and all of them form one graph for
    the topology and one set of stacked nodal solves.

    Each circuit of each state is solved as its own matrix, its nodes and branches in the
    order a batch of its netlist alone would give them, so every figure is the one
    ``evaluate_states`` of that netlist gives, to the last bit; only the numpy calls are
    shared."""
    out: list[list[StateEval]] = [[] for _ in groups]
    parts: list[tuple[int, _Group]] = []
    base = 0
    asked: list[list[State]] = []
    for k, (nl, states) in enumerate(groups):
        if states:
            # a state met twice (a note, a switch set back) is solved once
            g = _group(nl, list(dict.fromkeys(states)), base)
            parts.append((k, g))
            asked.append(list(states))
            base += g.n_vertices
    if not parts:
        return out
    gs = [g for _, g in parts]

    def cat(arrays: list[np.ndarray]) -> np.ndarray:
        return np.concatenate(arrays) if len(arrays) > 1 else arrays[0]

    za = cat([x + g.base for g in gs for x in g.za])
    zb = cat([x + g.base for g in gs for x in g.zb])
    wind_a = cat([(g.nl.arrays.wind_a[None, :] + (g.offs + g.base)[:, None]).ravel() for g in gs])
    wind_b = cat([(g.nl.arrays.wind_b[None, :] + (g.offs + g.base)[:, None]).ravel() for g in gs])
    gv = cat([(g.nl.arrays.grounds[None, :] + (g.offs + g.base)[:, None]).ravel() for g in gs])
    topo = topology(
        base,
        za,
        zb,
        cat([g.ba + g.base for g in gs]),
        cat([g.bb + g.base for g in gs]),
        wind_a,
        wind_b,
        gv,
    )
    tn = topo.term_node
    br_y = cat([g.br_y for g in gs])
    # trip paths: zero-impedance elements and wires (not device inputs, not ground)
    is_wire = cat([g.is_wire for g in gs])
    tl = components(topo.n_nodes, topo.br_na[is_wire], topo.br_nb[is_wire])
    ncols = np.zeros(topo.n_circ, dtype=np.int64)
    ref = np.zeros(topo.n_circ + 1)
    stamps: list[Stamp] = []
    inj_parts: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = []
    pre: list[dict[str, Any]] = []
    for g in gs:
        nl = g.nl
        ar = nl.arrays
        n_states = len(g.states)
        n_ct = len(nl.ct_list)
        goffs = g.offs + g.base
        live = g.live
        f = tn[ar.ct_first[None, :] + goffs[:, None]]
        s2 = tn[ar.ct_second[None, :] + goffs[:, None]]
        ct_open = topo.node_imp[f] != topo.node_imp[s2]
        ct_circ = topo.node_circ[f]
        load = np.broadcast_to(ar.ct_load, (n_states, n_ct))

        # Tapped windings joined across other than at the pair in use are solved as coupled
        # sections (windings.py); every other CT stays an ideal source across its tap.
        wa = winding_arrays(nl)

        def node_of(rows: np.ndarray, terms: np.ndarray, goffs: np.ndarray = goffs) -> np.ndarray:
            return tn[terms + goffs[rows]]

        wind_imp = topo.node_imp[tn[wa.term[None, :] + goffs[:, None]]]
        coupled = coupled_mask(wa, wind_imp)
        if wa.n:
            coupled, wind_imp, st_ = _coupled_windings(
                topo, wa, coupled, ct_open[:, wa.ct], ar, node_of, goffs
            )
            if st_ is not None:
                stamps.append(st_)
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
        zeros = np.zeros(len(fi), dtype=np.int64)
        inj_parts.append(
            (
                np.concatenate([fi, si, fi, si]),
                np.concatenate([zeros, zeros, zeros + 1, zeros + 1]),
                np.concatenate([li, -li, pi, -pi]),
                ct_circ[inj],
            )
        )
        ncols[ct_circ[inj]] = 2
        # largest live CT load current of each circuit, for the thresholds of the findings
        if n_ct:
            np.maximum.at(ref, ct_circ[live], np.broadcast_to(np.abs(ar.ct_load), live.shape)[live])
        pre.append(
            {
                "f": f,
                "s2": s2,
                "ct_open": ct_open,
                "ct_circ": ct_circ,
                "load": load,
                "wa": wa,
                "node_of": node_of,
                "wind_imp": wind_imp,
                "coupled": coupled,
            }
        )
    solve_topo, solve_y = topo, br_y
    if stamps:
        na = np.concatenate([topo.br_na, *(s.na for s in stamps)])
        nb = np.concatenate([topo.br_nb, *(s.nb for s in stamps)])
        solve_topo = replace(topo, br_na=na, br_nb=nb, node_imp=components(topo.n_nodes, na, nb))
        solve_y = np.concatenate([br_y, *(s.y for s in stamps)])
    if len(inj_parts) == 1:
        inj_node, inj_col, inj_val, _ = inj_parts[0]
    else:
        inj_node = np.concatenate([p[0] for p in inj_parts])
        inj_col = np.concatenate([p[1] for p in inj_parts])
        inj_val = np.concatenate([p[2] for p in inj_parts])
    sol = solve(solve_topo, solve_y, inj_node, inj_col, inj_val, ncols)

    b_start = 0
    for (k, g), p, states in zip(parts, pre, asked, strict=True):
        b_end = b_start + len(g.ba)
        batch = _batch_of(g, topo, sol, tl, ref, p, b_start, b_end)
        row = {st: r for r, st in enumerate(g.states)}
        out[k] = [StateEval(batch, row[st], st, i) for i, st in enumerate(states)]
        b_start = b_end
    return out


def _batch_of(
    g: _Group,
    topo: Any,
    sol: Any,
    tl: np.ndarray,
    ref: np.ndarray,
    p: dict[str, Any],
    b_start: int,
    b_end: int,
) -> _StateBatch:
    """The solved batch of one group (one row per state of ``g.states``)."""
    nl = g.nl
    ar = nl.arrays
    states = g.states
    n_states = len(states)
    n_t = nl.n_terminals
    tn = topo.term_node
    goffs = g.offs + g.base
    offs = g.offs
    live, ct_open, ct_circ, load = g.live, p["ct_open"], p["ct_circ"], p["load"]
    wa, coupled, node_of = p["wa"], p["coupled"], p["node_of"]
    f, s2 = p["f"], p["s2"]
    all_sections: dict[bool, tuple[np.ndarray, np.ndarray]] = {}

    def row_sections(row: int) -> tuple[np.ndarray, np.ndarray]:
        cur, out = sections_all()
        return cur[row], out[row]

    def sections_all(delivered: bool = True) -> tuple[np.ndarray, np.ndarray]:
        # every state at once on the first request (one vectorized pass); the section
        # currents are the same whether the delivered currents are worked out or not
        hit = all_sections.get(True) or all_sections.get(delivered)
        if hit is None:
            lv, cts = live[:, wa.ct], wa.ct
            hit = all_sections[delivered] = section_currents(
                wa,
                coupled,
                np.where(lv & coupled, load[:, cts] * wa.scale[None, :], 0.0),
                lambda a, b: sol.dv(a, b, 0),
                node_of,
                np.where(lv & ~ct_open[:, cts], load[:, cts] * wa.sign[None, :], 0.0),
                delivered,
            )
        return hit

    # device input currents, both columns
    n_in = len(nl.inputs)
    ia = tn[ar.input_a[None, :] + goffs[:, None]]
    ib = tn[ar.br_b[ar.n_wires :][None, :] + goffs[:, None]]
    y_in = 1.0 / ar.br_z[ar.n_wires :]
    cur = (sol.dv(ia, ib, 0) * y_in) * g.inp_active
    prb = (sol.dv(ia, ib, 1) * y_in) * g.inp_active
    inp_circ = topo.node_circ[ia] if n_in else np.zeros((n_states, 0), dtype=np.int64)
    ot = tl[tn[ar.out_terminal[None, :] + goffs[:, None]]]
    og = tl[tn[ar.out_target[None, :] + goffs[:, None]]]
    joined = coupled & live[:, wa.ct]
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
        out_connected=ot == og,
        node_circ=topo.node_circ,
        gnode=tn[ar.grounds[None, :] + goffs[:, None]],
        gpoint=topo.term_point[ar.grounds[None, :] + goffs[:, None]],
        windings=wa,
        wind_imp=p["wind_imp"],
        wind_joined=joined,
        any_joined=joined.any(axis=1).tolist(),
        ends_shorted=topo.term_point[wa.src[None, :] + goffs[:, None]]
        == topo.term_point[wa.snk[None, :] + goffs[:, None]],
        row_sections=row_sections,
        sections_all=sections_all,
    )
    batch.n_terminals = n_t
    batch.zero = {
        "a": np.concatenate(g.za),
        "b": np.concatenate(g.zb),
        "kind": np.repeat(np.arange(4), [len(x) for x in g.za]),
        "elem": np.concatenate(g.zelem),
        "row": np.concatenate(g.zrow),
    }
    batch.branches = {
        "row": g.sb,
        "a": g.ba,
        "b": g.bb,
        "na": topo.br_na[b_start:b_end],
        "nb": topo.br_nb[b_start:b_end],
    }
    batch.branch_y = g.br_y
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
    return batch


def _coupled_windings(
    topo: Any,
    wa: WindingArrays,
    joined: np.ndarray,
    open_tap: np.ndarray,
    ar: Any,
    node_of: Any,
    offs: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, Stamp | None]:
    """Which tapped windings to solve as coupled sections, and their branches: (coupled mask:
    states × tapped CTs, conduction label of each winding terminal as the rest of the network
    joins them: external paths, and for a winding joined only through others, those windings
    too; the stamp of the coupled windings, to add to the solve's branches, or None).

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
        return cand, labels, None
    return cand, labels, stamp(wa, cand, node_of)


# ---------------------------------------------------------------------------------------------
# checks
