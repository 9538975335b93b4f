"""Isolation plans a planner would sign: the shortest safe way to take a device out of
service and put it back, in the order the trade works (common practice, no source).

A plan has three parts, each a search over circuit states solved in batches (``state``):

1. Trips. Trip-path switches (switches with no contact in a part that holds a CT winding)
   part the outputs of the device and of every relay whose currents the CT work changes
   (its load currents move by more than 1 % of the circuit's largest CT current, or its
   inputs no longer see the same CT currents: a balanced differential that reads 0 A either
   way). They are opened first, the device's own first, and closed last.
2. CT work, from the state with the trips open: the shortest sequence of CT-side operations
   after which the device's inputs carry no current whatever the CTs drive (the probe column
   of ``state.evaluate_states``), its outputs are parted, and it is free to remove
   (``_Freedom``: none of its terminals joined to a CT or a trip target beyond what no
   provision can part). An edge (one operation) is allowed only when no state it passes
   (transitions, intermediate positions of a multi-position switch) nor its after state has
   a danger finding (``open_secondary``, ``trip_not_isolated``). A greedy best-first search
   finds a sequence fast; a lower bound proves it shortest (``no_shorter_isolation``: the
   switches that must move to part the outputs and to kill the inputs' currents, and a
   minimum cut for freeing the device), or else breadth-first search, nearest switches
   first, finds the shortest. Temporary jumpers (at the terminal-block terminals nearest each
   CT's terminals in use) are tried only when switches alone cannot do it.
3. Restoration: the CT work undone in the reverse order when that is safe (else A* back to
   the normal CT-side positions), a step to verify the relays' normal currents, then the
   trips closed in the reverse order.

``plan_notes.annotate`` gives every step its one-line ``why`` and its expected ``readings``.
"""

from __future__ import annotations

import heapq
import itertools
import math
from collections import deque
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from analysis.engine.cautions import cautions
from analysis.engine.netlist import Netlist
from analysis.engine.procedure import (
    ProcedureVerdict,
    _device_terminals,
    _union_labels,
    check_operations,
    region_mask,
    subnet,
    touched_terminals,
)
from analysis.engine.quantities import PROBE_ZERO_A
from analysis.engine.state import (
    APPEAR_FROM,
    ProcedureError,
    State,
    StateEval,
    apply_op,
    check_bypassed,
    check_trip,
    evaluate_states,
    normal_state,
)
from analysis.engine.state.solve import _contact_row, _link_row
from analysis.engine.topology import components

MAX_STATES = 20_000
# Edges solved per batch inside one layer of the search.
CHUNK = 256
# States the proof that a near plan is shortest may solve (``_Search.no_shorter_isolation``).
PROOF_BUDGET = 2_000
# States the fast (greedy) search may solve before the exact one takes over.
GREEDY_STATES = 2_000
# A probe current (per 1 A injected by each CT) that moves by more than this means the input
# no longer sees the same CT currents.
PROBE_CHANGE_A = 0.01


@dataclass(frozen=True, eq=False)
class IsolationPlan:
    """The plan JSON of the contracts: isolate, restore, collateral, verdict, cautions."""

    site: str
    device: str
    possible: bool
    isolate: tuple[dict[str, Any], ...]
    restore: tuple[dict[str, Any], ...]
    affected: tuple[dict[str, Any], ...]
    verdict: ProcedureVerdict | None
    jumpers_needed: tuple[tuple[str, str], ...] = ()
    reason: str | None = None

    def to_json(self, site: str | None = None) -> dict[str, Any]:
        """The plan JSON of the contracts (plus ``jumpers_needed`` and ``reason``)."""
        s = site if site is not None else self.site
        verdict = self.verdict.to_json(s) if self.verdict is not None else None
        if verdict is not None:
            verdict["procedure"] = None
        return {
            "site": s,
            "device": self.device,
            "possible": self.possible,
            "isolate": list(self.isolate),
            "restore": list(self.restore),
            "affected": list(self.affected),
            "verdict": verdict,
            "jumpers_needed": [list(p) for p in self.jumpers_needed],
            "reason": self.reason,
            "cautions": cautions(),
        }


class _Search:
    def __init__(self, nl: Netlist, device: str) -> None:
        self.nl = nl
        self.device = device
        self.work = frozenset({device})
        self.cache: dict[State, StateEval] = {}
        self.start = normal_state(nl)
        self.start_ev = self.eval([self.start])[0]
        nl.cache.setdefault(("normal_ref", self.start.energized), self.start_ev)
        self.open0 = self.start_ev.live_open
        self.order = _switch_order(nl)
        trip = _trip_path_switches(nl)
        self.trip_switches = [c for c in self.order if c in trip]
        self.ct_switches = [c for c in self.order if c not in trip]
        self.ct_set = frozenset(self.ct_switches)
        # The isolation search starts where the trips are open (``plan_isolation`` sets it).
        self.origin = self.start
        self.origin_ev = self.start_ev
        self.greedy_exhausted = False
        self.free = _Freedom(nl, device)
        # Whether the isolation goal includes "free to remove" (the lower bound of
        # ``_Freedom.min_moves`` holds only then).
        self.goal_free = True

    def eval(self, states: list[State]) -> list[StateEval]:
        todo = list(dict.fromkeys(s for s in states if s not in self.cache))
        if todo:
            for st, ev in zip(todo, evaluate_states(self.nl, todo), strict=True):
                self.cache[st] = ev
        return [self.cache[s] for s in states]

    def dangerous(self, before: StateEval, ev: StateEval) -> bool:
        if np.any(ev.live_open & ~self.open0):
            return True
        return bool(check_trip(self.nl, before, ev, self.work, None))

    def passes_danger(self, before: StateEval, passed: tuple[State, ...]) -> bool:
        """True when a state passed on the way (transitions, positions of a multi-position
        switch) is dangerous."""
        return any(self.dangerous(before, self.cache[p]) for p in passed)

    def outputs_open(self, ev: StateEval) -> bool:
        return not any(ev.out_connected[o.index] for o in self.nl.devices[self.device].outputs)

    def inputs_dead(self, ev: StateEval) -> bool:
        dev = self.nl.devices[self.device]
        return all(abs(ev.inp_probe[i.index]) < PROBE_ZERO_A for i in dev.inputs)

    def isolated(self, ev: StateEval) -> bool:
        return self.outputs_open(ev) and self.inputs_dead(ev)

    def isolated_and_free(self, st: State, ev: StateEval) -> bool:
        """Isolated, and as free to remove as the provisions allow (``_Freedom``)."""
        return self.isolated(ev) and self.free.attached(st) <= self.free.target

    def moves(
        self, st: State, jumpers: list[tuple[str, str]], switches: list[str] | None = None
    ) -> list[dict[str, Any]]:
        ops: list[dict[str, Any]] = []
        pos = dict(st.positions)
        for code in self.order if switches is None else switches:
            sw = self.nl.switches[code]
            ops.extend({"set": code, "to": p} for p in sw.positions if p != pos[code])
        placed = {j[0] for j in st.jumpers}
        for n, (a, b) in enumerate(jumpers, start=1):
            jid = f"TJ{n}"
            if jid in placed:
                ops.append({"remove_jumper": jid})
            else:
                ops.append({"add_jumper": [a, b], "id": jid})
        return ops

    def away_from_normal(self, st: State) -> int:
        """CT-side switches out of their normal position plus jumpers in place: a lower bound
        on the operations back to the normal state of the CT circuits that one operation
        changes by at most 1 (the trips stay open until the CT circuits are back)."""
        ct = self.ct_set
        n = sum(
            1
            for a, b in zip(st.positions, self.start.positions, strict=True)
            if a != b and a[0] in ct
        )
        return n + len(st.jumpers)

    def search(
        self,
        origin: State,
        goal: Any,
        jumpers: list[tuple[str, str]],
        switches: list[str] | None = None,
        h: Any = None,
    ) -> list[dict[str, Any]] | None:
        """Shortest safe operation sequence from ``origin`` to a state where ``goal`` holds.

        A* (Hart, Nilsson and Raphael's best-first search; from memory) with unit operation
        costs and ``h`` a lower bound on the operations left that no operation changes by more
        than 1 (a consistent heuristic; ``None``: 0, i.e. breadth-first). Edges are taken in
        order of f = g + 1 + h(after), solved in batches (``CHUNK`` at most); an edge is
        solved only when its turn comes, and the search stops at the first safe edge that
        reaches the goal. Since f never decreases along a path, every state is first reached
        by a shortest path and the first goal reached is a nearest one. Breadth-first, the
        plan is the first of the shortest in move order.
        """
        hfun = h if h is not None else (lambda _st: 0)
        parent: dict[State, tuple[State, dict[str, Any]] | None] = {origin: None}
        if goal(origin, self.eval([origin])[0]):
            return []
        heap: list[tuple[int, int, int, State, dict[str, Any], tuple[State, ...], State]] = []
        seq = itertools.count()

        def expand(st: State, g: int) -> None:
            for op in self.moves(st, jumpers, switches):
                passed, after = apply_op(self.nl, st, op, 0)
                if after not in parent:
                    # With a heuristic, equal f goes deeper first (any order of equal f keeps
                    # A* exact with a consistent h); without one, level by level.
                    depth = -(g + 1) if h is not None else g + 1
                    item = (g + 1 + hfun(after), depth, next(seq), st, op, passed, after)
                    heapq.heappush(heap, item)

        expand(origin, 0)
        while heap and len(parent) < MAX_STATES:
            key = heap[0][:2]
            first = heap[0][3]
            layer = []
            # A layer: every edge of equal (f, g) breadth-first; with a heuristic, those of
            # one parent, so that the search follows one path of equal f at a time.
            while heap and heap[0][:2] == key and (h is None or heap[0][3] is first):
                item = heapq.heappop(heap)
                if item[6] not in parent:
                    layer.append(item)
            admitted: list[State] = []
            for c0 in range(0, len(layer), CHUNK):
                chunk = layer[c0 : c0 + CHUNK]
                self.eval([s for e in chunk for s in (e[3], *e[5], e[6])])
                for _f, _g, _n, st, op, passed, after in chunk:
                    if after in parent:
                        continue
                    before = self.cache[st]
                    if self.passes_danger(before, passed):
                        continue
                    aev = self.cache[after]
                    if self.dangerous(before, aev):
                        continue
                    parent[after] = (st, op)
                    if goal(after, aev):
                        return _path(parent, after)
                    admitted.append(after)
            for st in admitted:
                expand(st, abs(key[1]))
        return None

    def left_to_isolate(self, st: State, ev: StateEval) -> int:
        """Outputs of the device still connected, its inputs still carrying current, and its
        terminals still joined to a CT circuit or trip target beyond what must stay."""
        dev = self.nl.devices[self.device]
        return (
            sum(ev.out_connected[o.index] for o in dev.outputs)
            + sum(abs(ev.inp_probe[i.index]) >= PROBE_ZERO_A for i in dev.inputs)
            + max(0, self.free.attached(st) - self.free.target)
        )

    def greedy(self, goal: Any, limit: int = GREEDY_STATES) -> list[dict[str, Any]] | None:
        """A safe isolating sequence, found fast and not necessarily shortest: best-first
        search that always goes on from the state with the fewest outputs connected and
        inputs carrying current (``left_to_isolate``; ties: the state reached first), every
        edge checked as in ``search``. None when none is found within ``limit`` states
        (``greedy_exhausted`` then says whether every safely reachable state was seen)."""
        origin = self.origin
        parent: dict[State, tuple[State, dict[str, Any]] | None] = {origin: None}
        if goal(origin, self.origin_ev):
            return []
        seq = itertools.count(1)
        heap: list[tuple[int, int, State]] = [
            (self.left_to_isolate(origin, self.origin_ev), 0, origin)
        ]
        spent = 0
        while heap:
            st = heapq.heappop(heap)[2]
            edges = []
            for op in self.moves(st, [], self.ct_switches):
                passed, after = apply_op(self.nl, st, op, 0)
                if after not in parent:
                    edges.append((op, passed, after))
            spent += len(edges)
            if spent > limit:
                self.greedy_exhausted = False
                return None
            self.eval([s for e in edges for s in (*e[1], e[2])])
            before = self.cache[st]
            for op, passed, after in edges:
                if after in parent:
                    continue
                if self.passes_danger(before, passed):
                    continue
                aev = self.cache[after]
                if self.dangerous(before, aev):
                    continue
                parent[after] = (st, op)
                if goal(after, aev):
                    return _path(parent, after)
                heapq.heappush(heap, (self.left_to_isolate(after, aev), next(seq), after))
        # every state reachable by safe operations has been seen: no sequence exists
        self.greedy_exhausted = True
        return None

    def min_changes(self, switches: list[str], pred: Any, cap: int, budget: list[int]) -> int:
        """Fewest switches moved from the normal state (each to any other position, in any
        order, no check on the way) that make ``pred`` hold, or ``cap + 1`` when no set of up
        to ``cap`` does; raises ``_OverBudget`` when that takes more than ``budget`` states."""
        if pred(self.origin_ev):
            return 0
        base = dict(self.origin.positions)
        for k in range(1, min(cap, len(switches)) + 1):
            states = []
            for combo in itertools.combinations(switches, k):
                alts = [[p for p in self.nl.switches[c].positions if p != base[c]] for c in combo]
                for choice in itertools.product(*alts):
                    pos = dict(base)
                    pos.update(zip(combo, choice, strict=True))
                    states.append(replace(self.origin, positions=tuple(pos.items())))
            budget[0] -= len(states)
            if budget[0] < 0:
                raise _OverBudget
            for c0 in range(0, len(states), 4 * CHUNK):
                if any(pred(ev) for ev in self.eval(states[c0 : c0 + 4 * CHUNK])):
                    return k
        return cap + 1

    def no_shorter_isolation(self, length: int) -> bool:
        """True when no sequence of fewer than ``length`` switch operations can isolate the
        device, safe or not, from the origin (trips open), moving the CT-side switches. The
        freedom goal alone needs ``_Freedom.min_moves`` operations (a cut argument); the
        outputs' connection depends only on switches with a contact
        in the outputs' conducting parts (A), the inputs' currents only on those with a
        contact in the inputs' parts (B); a sequence moves at least a switches of A and b of
        B (a, b: the fewest that open the outputs, resp. kill the input currents), so at least
        a + b operations when A and B share no switch, max(a, b) otherwise. The last state of
        a safe sequence also leaves every live CT closed, so a and b count only the sets
        that do that too."""
        nl = self.nl
        if self.goal_free and self.free.min_moves(self.origin, self.origin_ev) >= length:
            return True
        lab = _union_labels(nl)
        dev = nl.devices[self.device]
        out_parts = {int(lab[t]) for o in dev.outputs for t in (o.terminal, o.target)}
        in_parts = {int(lab[t]) for i in dev.inputs for t in (i.a, i.b)}

        def touching(parts: set[int]) -> list[str]:
            return [
                c
                for c in self.ct_switches
                if any(int(lab[x.a]) in parts for x in nl.switches[c].contacts)
            ]

        sw_a, sw_b = touching(out_parts), touching(in_parts)

        # The last state of a sequence has no live CT open that was closed at the start
        # either; the switches of one set only open or close the CTs of their own parts.
        def closed_cts(ev: StateEval) -> bool:
            return not np.any(ev.live_open & ~self.open0)

        def out_goal(ev: StateEval) -> bool:
            return self.outputs_open(ev) and closed_cts(ev)

        # The inputs' parts fall into groups that share no switch; each group's inputs are
        # killed by its own switches alone, so the b of the groups add up.
        groups: dict[int, int] = {q: q for q in in_parts}

        def find(q: int) -> int:
            while groups[q] != q:
                q = groups[q]
            return q

        for code in sw_b:
            parts = {int(lab[x.a]) for x in nl.switches[code].contacts} & in_parts
            roots = sorted({find(q) for q in parts})
            for r in roots[1:]:
                groups[r] = roots[0]
        by_root: dict[int, list[Any]] = {}
        for i in dev.inputs:
            by_root.setdefault(find(int(lab[i.a])), []).append(i)

        def dead(inputs: list[Any]) -> Any:
            def pred(ev: StateEval) -> bool:
                return closed_cts(ev) and all(
                    abs(ev.inp_probe[i.index]) < PROBE_ZERO_A for i in inputs
                )

            return pred

        budget = [PROOF_BUDGET]
        try:
            a = self.min_changes(sw_a, out_goal, length - 1, budget)
            if a >= length:
                return True
            floor = a if set(sw_a).isdisjoint(sw_b) else 0
            b = 0
            for root, inputs in by_root.items():
                mine = [
                    c
                    for c in sw_b
                    if any(
                        find(int(lab[x.a])) == root
                        for x in nl.switches[c].contacts
                        if int(lab[x.a]) in in_parts
                    )
                ]
                b += self.min_changes(mine, dead(inputs), length - floor - b - 1, budget)
                if floor + b >= length:
                    return True
            return max(a, floor + b) >= length
        except _OverBudget:
            return False


class _OverBudget(Exception):
    """The proof that a plan is shortest would take more states than it is worth."""


def _path(parent: dict[State, Any], end: State) -> list[dict[str, Any]]:
    path: list[dict[str, Any]] = []
    cur = end
    while parent[cur] is not None:
        prev, op = parent[cur]
        path.append(op)
        cur = prev
    return path[::-1]


def _rings(nl: Netlist, device: str, order: list[str]) -> list[list[str]]:
    """Nested sets of switches by their distance (in elements: links, wires, contacts,
    inputs, winding sections) from the device's terminals, whole switch groups (the part of
    a code before "/") at a time; the last set holds every switch. Each keeps ``order``."""
    ar = nl.arrays
    a = np.concatenate([ar.link_a, ar.contact_a, ar.br_a, ar.wind_a]).tolist()
    b = np.concatenate([ar.link_b, ar.contact_b, ar.br_b, ar.wind_b]).tolist()
    adj: dict[int, list[int]] = {}
    for x, y in zip(a, b, strict=True):
        adj.setdefault(x, []).append(y)
        adj.setdefault(y, []).append(x)
    dist: dict[int, int] = {}
    q: deque[int] = deque()
    for t in _device_terminals(nl, device):
        if t not in dist:
            dist[t] = 0
            q.append(t)
    while q:
        t = q.popleft()
        for u in adj.get(t, ()):
            if u not in dist:
                dist[u] = dist[t] + 1
                q.append(u)
    far = len(nl.terminals) + 1
    group: dict[str, int] = {}
    for code in order:
        sw = nl.switches[code]
        d = min((min(dist.get(c.a, far), dist.get(c.b, far)) for c in sw.contacts), default=far)
        g = code.split("/", 1)[0]
        group[g] = min(group.get(g, far), d)
    levels = sorted(set(group.values()))
    rings = [[c for c in order if group[c.split("/", 1)[0]] <= lv] for lv in levels]
    if not rings or len(rings[-1]) < len(order):
        rings.append(list(order))
    return rings


def _trip_path_switches(nl: Netlist) -> set[str]:
    """Switches with no contact in a part that holds a CT winding (over every element,
    whatever its state): they act on trip and close paths only, never on a CT current."""
    lab = _union_labels(nl)
    ct_parts = set(lab[nl.arrays.ct_first].tolist())
    return {
        code
        for code, sw in nl.switches.items()
        if all(int(lab[c.a]) not in ct_parts for c in sw.contacts)
    }


def _switch_order(nl: Netlist) -> list[str]:
    """Switches to try, those on trip paths first: among plans of the same length the search
    returns the first it meets, and isolating the trip before touching the CT circuits is the
    order the trade prefers (common practice, no source)."""
    ar = nl.arrays
    lab = components(
        nl.n_terminals,
        np.concatenate([ar.link_a, ar.contact_a, ar.br_a, ar.wind_a]),
        np.concatenate([ar.link_b, ar.contact_b, ar.br_b, ar.wind_b]),
    )
    ct_parts = set(lab[ar.ct_first].tolist())

    def on_trip_path(code: str) -> bool:
        return all(int(lab[c.a]) not in ct_parts for c in nl.switches[code].contacts)

    return sorted(nl.switches, key=lambda code: not on_trip_path(code))


def _unswitched_outputs(nl: Netlist, device: str) -> list[str]:
    """Outputs of ``device`` joined to their target by links and wires alone."""
    ar = nl.arrays
    wires = np.arange(ar.n_wires)
    lab = components(
        nl.n_terminals,
        np.concatenate([ar.link_a, ar.br_a[wires]]),
        np.concatenate([ar.link_b, ar.br_b[wires]]),
    )
    return [
        f"output {o.name} ({nl.terminals[o.terminal]} → {nl.terminals[o.target]})"
        for o in nl.devices[device].outputs
        if lab[o.terminal] == lab[o.target]
    ]


def _jumper_candidates(nl: Netlist, ev: StateEval) -> list[tuple[str, str]]:
    """For each live CT of the region: the terminal-block terminals nearest (over wires and
    links) to each of its two terminals in use."""
    adj: dict[int, list[int]] = {}
    for w in nl.wires:
        adj.setdefault(w.a, []).append(w.b)
        adj.setdefault(w.b, []).append(w.a)
    for k in nl.links:
        adj.setdefault(k.a, []).append(k.b)
        adj.setdefault(k.b, []).append(k.a)

    def nearest_block(t0: int) -> int:
        seen = {t0}
        q = deque([t0])
        while q:
            t = q.popleft()
            if nl.owner(t) in nl.terminal_blocks:
                return t
            for u in adj.get(t, ()):
                if u not in seen:
                    seen.add(u)
                    q.append(u)
        return t0

    out: list[tuple[str, str]] = []
    for ct in nl.ct_list:
        if not ev.live[ct.index]:
            continue
        a, b = nearest_block(ct.first), nearest_block(ct.second)
        pair = (nl.terminals[a], nl.terminals[b])
        if a != b and pair not in out:
            out.append(pair)
    return out


def _shortest_isolation(
    search: _Search, goal: Any, jumpers: list[tuple[str, str]]
) -> list[dict[str, Any]] | None:
    """The shortest safe isolating sequence from ``search.origin`` over the CT-side
    switches, fast where that can be proven.

    1. ``greedy`` finds a sequence; it is returned when ``no_shorter_isolation`` proves that
       none is shorter. A greedy search that has seen every safely reachable state without
       reaching the goal proves that there is none.
    2. Otherwise breadth-first search over the nearest ring of switches (``_rings``), then
       the next ring, each plan found with the same proof, and finally over every switch.
    With temporary jumpers, or when the greedy search gives up, breadth-first search over
    every switch at once (the exhaustive search)."""
    cts = search.ct_switches
    if jumpers:
        return search.search(search.origin, goal, jumpers, cts)
    fast = search.greedy(goal)
    if fast is None:
        return None if search.greedy_exhausted else search.search(search.origin, goal, [], cts)
    if search.no_shorter_isolation(len(fast)):
        return fast
    for ring in _rings(search.nl, search.device, cts):
        plan = search.search(search.origin, goal, [], ring)
        if plan is None:
            continue
        if len(ring) == len(cts) or search.no_shorter_isolation(len(plan)):
            return plan
        break
    return search.search(search.origin, goal, [], cts)


class _Freedom:
    """How far a device is from being free to remove: the number of its terminals (input
    ends, output terminals) joined, through closed contacts, links, jumpers, wires and the
    inputs of other devices, to a CT terminal or to a trip target. Free to remove is when
    only the terminals that no provision can part (``target``, from the graph of the elements
    no switch position opens) stay joined: a draw-out case withdrawn, or the inputs, the
    neutral and the outputs opened at a test switch (common practice, no source)."""

    def __init__(self, nl: Netlist, device: str) -> None:
        self.nl = nl
        dev = nl.devices[device]
        self.device = device
        self.terms = np.asarray(
            sorted({t for i in dev.inputs for t in (i.a, i.b)} | {o.terminal for o in dev.outputs}),
            dtype=np.int64,
        )
        foreign = {t for c in nl.ct_list for t in c.terminals.values()}
        foreign |= {o.target for o in nl.outputs}
        self.foreign = np.asarray(sorted(foreign - set(self.terms.tolist())), dtype=np.int64)
        ar = nl.arrays
        others = np.asarray([i.device != device for i in nl.inputs], dtype=bool)
        self._fixed_a = np.concatenate([ar.link_a, ar.br_a[: ar.n_wires], ar.input_a[others]])
        self._fixed_b = np.concatenate(
            [ar.link_b, ar.br_b[: ar.n_wires], ar.br_b[ar.n_wires :][others]]
        )
        self._wire_ix = np.arange(ar.n_wires)
        self._link_ix = np.arange(len(nl.links))
        always = [c for c in nl.contacts if c.closed_in >= set(self._switch_of(c).positions)]
        lab = components(
            nl.n_terminals,
            np.concatenate([self._fixed_a, [c.a for c in always]]).astype(np.int64),
            np.concatenate([self._fixed_b, [c.b for c in always]]).astype(np.int64),
        )
        self.stuck = self._joined(lab)
        self.target = len(self.stuck)
        self._cache: dict[State, int] = {}

    def _switch_of(self, contact: Any) -> Any:
        for sw in self.nl.switches.values():
            if contact in sw.contacts:
                return sw
        raise KeyError(contact)

    def _joined(self, lab: np.ndarray) -> list[int]:
        bad = set(lab[self.foreign].tolist())
        return [int(t) for t in self.terms.tolist() if int(lab[t]) in bad]

    def labels(self, st: State) -> np.ndarray:
        nl = self.nl
        ar = nl.arrays
        links = _link_row(nl, st)
        wires = np.ones(ar.n_wires, dtype=bool)
        wires[list(st.lifted_wires)] = False
        others_in = [i for i in nl.inputs if i.device != self.device and i.device not in st.removed]
        closed = _contact_row(nl, st)
        a = np.concatenate(
            [
                ar.link_a[links],
                ar.br_a[: ar.n_wires][wires],
                np.asarray([i.a for i in others_in], dtype=np.int64),
                ar.contact_a[closed],
                np.asarray([j[1] for j in st.jumpers], dtype=np.int64),
            ]
        )
        b = np.concatenate(
            [
                ar.link_b[links],
                ar.br_b[: ar.n_wires][wires],
                np.asarray([i.b for i in others_in], dtype=np.int64),
                ar.contact_b[closed],
                np.asarray([j[2] for j in st.jumpers], dtype=np.int64),
            ]
        )
        return components(nl.n_terminals, a, b)

    def joined(self, st: State) -> list[int]:
        """The device's terminals joined to a CT terminal or a trip target in ``st``."""
        return self._joined(self.labels(st))

    def attached(self, st: State) -> int:
        hit = self._cache.get(st)
        if hit is None:
            hit = self._cache[st] = len(self.joined(st))
        return hit

    def min_moves(self, origin: State, origin_ev: StateEval) -> int:
        """A lower bound on the switch operations that free the device from ``origin``.

        The terminals to free are joined in ``origin`` and not in the graph of the elements
        no position opens. Whatever the final state, the contacts opened on the way must
        cut them from the CT terminals and trip targets in ``origin``'s graph (what closes
        only adds paths). One operation on switch s opens at most m_s of its contacts, so
        giving each contact of s the capacity 1/m_s (others: unbounded) makes the minimum
        cut (= maximum flow; Ford and Fulkerson, from memory) a lower bound on the number of
        operations.

        Then the live CTs: once the device is parted from them, each must be closed by a
        path that avoids it. When even every contact of the switches counted above (any
        position) cannot give one such a path, a switch that only closes (a shorting screw)
        must move as well: one more operation."""
        nl = self.nl
        to_free = sorted(set(self.joined(origin)) - set(self.stuck))
        if not to_free:
            return 0
        pos = dict(origin.positions)
        caps: list[tuple[int, int, float]] = []
        closed_now = _contact_row(nl, origin)
        for sw in nl.switches.values():
            here = sw.closed(pos[sw.code])
            # the most origin-closed contacts one move (from any position) opens
            m = max(
                (
                    len((sw.closed(p) & here) - sw.closed(q))
                    for p in sw.positions
                    for q in sw.positions
                ),
                default=0,
            )
            for c in sw.contacts:
                if not closed_now[c.index]:
                    continue
                openable = (
                    c.index in here
                    and m > 0
                    and any(c.index not in sw.closed(p) for p in sw.positions)
                )
                caps.append((c.a, c.b, 1.0 / m if openable else math.inf))
        ar = nl.arrays
        links = _link_row(nl, origin)
        wires = np.ones(ar.n_wires, dtype=bool)
        wires[list(origin.lifted_wires)] = False
        fixed = list(zip(ar.link_a[links].tolist(), ar.link_b[links].tolist(), strict=True))
        fixed += list(
            zip(
                ar.br_a[: ar.n_wires][wires].tolist(),
                ar.br_b[: ar.n_wires][wires].tolist(),
                strict=True,
            )
        )
        fixed += [
            (i.a, i.b)
            for i in nl.inputs
            if i.device != self.device and i.device not in origin.removed
        ]
        fixed += [(j[1], j[2]) for j in origin.jumpers]
        caps += [(x, y, math.inf) for x, y in fixed]
        moves = _min_cut_moves(nl.n_terminals, caps, to_free, self.foreign.tolist())
        # switches that can open a contact closed in ``origin``: the operations counted above
        opening = [
            sw
            for sw in nl.switches.values()
            if any(sw.closed(pos[sw.code]) - sw.closed(p) for p in sw.positions)
        ]
        closable = [c for sw in opening for c in sw.contacts]
        closable += [c for c in nl.contacts if closed_now[c.index]]
        lab = components(
            nl.n_terminals,
            np.asarray([x for x, _ in fixed] + [c.a for c in closable], dtype=np.int64),
            np.asarray([y for _, y in fixed] + [c.b for c in closable], dtype=np.int64),
        )
        if any(origin_ev.live[c.index] and lab[c.first] != lab[c.second] for c in nl.ct_list):
            moves += 1
        return moves


def _min_cut_moves(
    n: int, caps: list[tuple[int, int, float]], sources: list[int], sinks: list[int]
) -> int:
    """Ceiling of the minimum cut between ``sources`` and ``sinks`` of an undirected graph
    with capacities (``math.inf``: uncuttable), by scipy's maximum flow on integer
    capacities (the finite ones are 1/m for small m, scaled by their common multiple)."""
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import maximum_flow

    finite = [c for _, _, c in caps if math.isfinite(c)]
    if not finite:
        return 10**6
    scale = 1
    for c in finite:
        scale = math.lcm(scale, round(1.0 / c))
    big = scale * (len(finite) + 1)
    src, snk = n, n + 1
    rows: list[int] = []
    cols: list[int] = []
    vals: list[int] = []
    for x, y, c in caps:
        v = big if not math.isfinite(c) else round(c * scale)
        rows += [x, y]
        cols += [y, x]
        vals += [v, v]
    for t in sources:
        rows.append(src)
        cols.append(t)
        vals.append(big)
    for t in sinks:
        rows.append(t)
        cols.append(snk)
        vals.append(big)
    g = csr_matrix((np.asarray(vals, dtype=np.int64), (rows, cols)), shape=(n + 2, n + 2)).astype(
        np.int32
    )
    g.sum_duplicates()
    flow = maximum_flow(g, src, snk).flow_value
    if flow >= big:
        return 10**6
    return -(-int(flow) // scale)


def _stripped(ops: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The operations without the plan's ``why`` and ``readings`` (what the checker and a
    stored procedure take)."""
    return [{k: v for k, v in op.items() if k not in ("why", "readings")} for op in ops]


def _changed_relays(
    search: _Search, states: list[State], device: str
) -> dict[str, tuple[str, float, float, bool]]:
    """Devices with outputs (other than ``device``) whose inputs, in any of ``states``, carry
    other than in the normal state: more than 1 % of the circuit's largest CT current away
    under load, or a different share of the CT currents (the probe column: a balanced
    differential that reads 0 A under load either way, but would no longer see a fault).
    Value: (input, normal A, furthest A, whether only the probe changed)."""
    nl = search.nl
    norm = search.start_ev
    out: dict[str, tuple[str, float, float, bool]] = {}
    evs = search.eval(states)
    for dev in nl.devices.values():
        if dev.code == device or not dev.outputs or not dev.inputs:
            continue
        worst: tuple[float, str, float, float] | None = None
        probe_only: str | None = None
        for ev in evs:
            for di in dev.inputs:
                k = di.index
                ref = max(norm.inp_ref_a[k], ev.inp_ref_a[k])
                off = abs(ev.inp_cur[k] - norm.inp_cur[k])
                if ref > 0 and off > APPEAR_FROM * ref:
                    if worst is None or off > worst[0]:
                        worst = (off, di.name, abs(norm.inp_cur[k]), abs(ev.inp_cur[k]))
                elif abs(ev.inp_probe[k] - norm.inp_probe[k]) > PROBE_CHANGE_A:
                    probe_only = probe_only or di.name
        if worst is not None:
            out[dev.code] = (worst[1], worst[2], worst[3], False)
        elif probe_only is not None:
            k = next(i.index for i in dev.inputs if i.name == probe_only)
            a = abs(norm.inp_cur[k])
            out[dev.code] = (probe_only, a, a, True)
    return out


def _trip_sequence(search: _Search, outputs: list[Any]) -> list[dict[str, Any]] | None:
    """Shortest sequence of trip-path switch operations that parts every output of
    ``outputs`` from its target (none when there is nothing to part)."""
    if not outputs:
        return []

    def goal(_st: State, ev: StateEval) -> bool:
        return not any(ev.out_connected[o.index] for o in outputs)

    return search.search(search.start, goal, [], search.trip_switches)


def _run(nl: Netlist, start: State, ops: list[dict[str, Any]]) -> State:
    for n, op in enumerate(ops, start=1):
        _, start = apply_op(nl, start, op, n)
    return start


def _not_possible(
    netlist: Netlist, device: str, reason: str, needed: tuple[tuple[str, str], ...] = ()
) -> IsolationPlan:
    return IsolationPlan(
        netlist.site_code,
        device,
        False,
        (),
        (),
        (),
        check_operations(netlist, [], (device,)),
        jumpers_needed=needed,
        reason=reason,
    )


def plan_isolation(netlist: Netlist, device: str) -> IsolationPlan:
    """A plan a planner would sign to take ``device`` out, and the one that puts it back.

    1. A CT open in the recorded normal state is reported first: nothing can be planned on
       a circuit that is already in danger.
    2. Trips: the trip-path switches (``_trip_path_switches``) that part the outputs of the
       device and of every relay whose currents the plan changes are opened first, the
       device's own first (``_trip_sequence``; also where the currents alone would not need
       it, such as a balanced differential).
    3. CT work: the shortest safe sequence of CT-side operations (switches, then temporary
       jumpers at terminal-block points) from there that leaves the device's inputs without
       current, its outputs parted and the device free to remove (``_Freedom``), every state
       on the way checked (``_shortest_isolation``).
    4. Restore: A* back to the normal position of every CT-side switch with the jumpers
       removed, then a step to verify the currents of the relays whose trips are open
       (their normal values), then the trips closed in the reverse order.
    Every operation carries a one-line ``why`` and the ``readings`` after it
    (``plan_notes``). ``possible`` is True only when the check of the whole plan is safe;
    otherwise ``reason`` says why and ``jumpers_needed`` where temporary jumpers would go.
    (Common practice, no source: isolate the trips before the CT circuits, restore the CT
    circuits and verify before the trips.)
    """
    from analysis.engine.plan_notes import annotate

    if device not in netlist.devices:
        raise ProcedureError(f"unknown device {device!r}")
    dev0 = netlist.devices[device]
    if not dev0.inputs and not dev0.outputs:
        return _not_possible(netlist, device, f"{device} has no inputs or outputs to isolate")
    seeds, _ = touched_terminals(netlist, [], (device,))
    nl = subnet(netlist, region_mask(netlist, seeds, []))
    search = _Search(nl, device)
    start = search.start

    already = [c for c in nl.ct_list if search.start_ev.live_open[c.index]]
    if already:
        names = ", ".join(f"{c.code} ({c.in_use[0]}-{c.in_use[1]})" for c in already)
        return _not_possible(
            netlist,
            device,
            f"CT {names} is live and already open in the recorded normal state: correct the "
            "record, or short the CT, before any plan for "
            f"{device} (an open CT secondary is a danger now, not only during the work)",
        )

    if _unswitched_outputs(nl, device):
        # no switch or jumper can part an output wired straight to its target
        return _impossible(netlist, nl, device, _jumper_candidates(nl, search.start_ev))

    relays = [d for d in nl.devices.values() if d.outputs]
    # The outputs a trip-path switch can part (a lockout relay's output wired straight to
    # the breaker has none): for a first search, every one of them is parted.
    partable = [o for d in relays for o in d.outputs if _trip_sequence(search, [o]) is not None]
    own_outputs = [o for o in partable if o.device == device]
    trips = _trip_sequence(search, partable) or []

    normal_ct = {c: p for c, p in start.positions if c in search.ct_set}

    def goal_normal(st: State, _ev: StateEval) -> bool:
        return not st.jumpers and all(p == normal_ct[c] for c, p in st.positions if c in normal_ct)

    candidates = _jumper_candidates(nl, search.start_ev)
    core: list[dict[str, Any]] | None = None
    restore_ct: list[dict[str, Any]] | None = None
    for jumpers in ([], candidates):
        if jumpers is candidates and not candidates:
            break
        search.origin = _run(nl, start, trips)
        search.origin_ev = search.eval([search.origin])[0]
        for goal in (search.isolated_and_free, lambda _st, ev: search.isolated(ev)):
            search.goal_free = goal == search.isolated_and_free
            search.greedy_exhausted = False
            core = _shortest_isolation(search, goal, jumpers)
            if core is not None:
                break
        if core is not None:
            end = _run(nl, search.origin, core)

            restore_ct = _reversed(search, core, end)
            if restore_ct is None:
                restore_ct = search.search(
                    end, goal_normal, jumpers, search.ct_switches, h=search.away_from_normal
                )
            if restore_ct is not None:
                break
        core = restore_ct = None

    if core is None or restore_ct is None:
        return _impossible(netlist, nl, device, candidates)

    # The trips the plan needs: the device's own, and those of every relay whose currents
    # the CT work changes (states on the way included).
    st = search.origin
    visited: list[State] = []
    for n, op in enumerate([*core, *restore_ct], start=1):
        passed, st = apply_op(nl, st, op, n)
        visited.extend(passed)
        visited.append(st)
    changed = _changed_relays(search, visited, device)
    needed_outputs = own_outputs + [o for o in partable if o.device in changed]
    needed = _trip_sequence(search, needed_outputs)
    if needed is None:
        needed = trips
    for chosen in (_own_first(search, needed), _own_first(search, trips)):
        isolate, restore = annotate(search, chosen, core, restore_ct, changed)
        verdict = check_operations(netlist, _stripped([*isolate, *restore]), (device,))
        if verdict.safe:
            break
    end_ev = search.eval([_run(nl, start, _stripped(isolate))])[0]
    affected = tuple(
        {
            "device": f.device,
            "input": f.input,
            "functions": list(nl.devices[f.device or ""].functions),
            "message": f.message,
        }
        for f in check_bypassed(nl, search.start_ev, end_ev, None)
        if f.device != device
    )
    reason = None
    if not verdict.safe:
        d = verdict.first_danger or {}
        reason = (
            f"the plan found fails its own check at step {d.get('step')} ({d.get('stage')}): "
            f"{d.get('code')} on {d.get('ct') or d.get('device')}"
        )
    return IsolationPlan(
        site=netlist.site_code,
        device=device,
        possible=verdict.safe,
        isolate=tuple(isolate),
        restore=tuple(restore),
        affected=affected,
        verdict=verdict,
        reason=reason,
    )


def _reversed(
    search: _Search, core: list[dict[str, Any]], end: State
) -> list[dict[str, Any]] | None:
    """The CT work undone in the reverse order (each switch back to where it was, each
    jumper removed), the way a crew retraces its steps, when every state on the way is safe
    and it is as short as any restoration can be (``away_from_normal``); else None."""
    nl = search.nl
    before = search.origin
    back: list[dict[str, Any]] = []
    for n, op in enumerate(core, start=1):
        if "set" in op:
            back.append({"set": op["set"], "to": dict(before.positions)[op["set"]]})
        elif "add_jumper" in op:
            back.append({"remove_jumper": op["id"]})
        else:
            return None
        _, before = apply_op(nl, before, op, n)
    back.reverse()
    if len(back) > search.away_from_normal(end):
        return None
    st = end
    edges = []
    for n, op in enumerate(back, start=1):
        passed, after = apply_op(nl, st, op, n)
        edges.append((st, passed, after))
        st = after
    search.eval([x for e in edges for x in (e[0], *e[1], e[2])])
    for st, passed, after in edges:
        b = search.cache[st]
        if search.passes_danger(b, passed) or search.dangerous(b, search.cache[after]):
            return None
    return back


def _own_first(search: _Search, trips: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The trip operations with those that part the device's own outputs first (they act
    on different switches, so their order changes no state the plan passes)."""
    own = {o.index for o in search.nl.devices[search.device].outputs}
    st = search.start
    first: list[dict[str, Any]] = []
    rest: list[dict[str, Any]] = []
    for n, op in enumerate(trips, start=1):
        before = search.eval([st])[0]
        _, st = apply_op(search.nl, st, op, n)
        after = search.eval([st])[0]
        parted = {o.index for o in search.nl.outputs if before.out_connected[o.index]} - {
            o.index for o in search.nl.outputs if after.out_connected[o.index]
        }
        (first if parted & own else rest).append(op)
    return first + rest


def _impossible(
    netlist: Netlist, nl: Netlist, device: str, candidates: list[tuple[str, str]]
) -> IsolationPlan:
    dev = nl.devices[device]
    tried = " and temporary jumpers" if candidates else ""
    reason = (
        f"no sequence of switch operations{tried}"
        f" isolates {device} without opening a live CT secondary or operating a trip "
        f"output that is still connected"
    )
    hard = _unswitched_outputs(nl, device)
    if hard:
        reason += (
            "; no switch is on the path of "
            + ", ".join(hard)
            + " (a wire would have to be lifted, or a trip test switch fitted)"
        )
    if not dev.outputs and not dev.inputs:
        reason = f"{device} has no inputs or outputs to isolate"
    needed = tuple(candidates) or tuple(
        (nl.terminals[c.first], nl.terminals[c.second]) for c in nl.ct_list
    )
    return _not_possible(netlist, device, reason, needed)
