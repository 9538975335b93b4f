"""Safe isolation plans: the shortest operation sequence that takes a device out of service.

Method: search over circuit states (switch positions and temporary jumpers), states solved in
batches. The search is pruned to the switches of the device's circuits and trip paths (the
procedure region). An edge (one operation) is allowed only when neither its transition nor
its after state has a danger finding (``open_secondary`` on a CT that was not already open,
``trip_not_isolated``), the device being the one the work is for. The goal: every output of
the device disconnected from its target and no current in any of its inputs whatever the CTs
drive (the probe column of ``state.evaluate_states``).

Isolation (``_shortest_isolation``): a greedy best-first search finds a sequence fast; a lower
bound on the length of any isolating sequence (a relaxed problem that drops the checks on the
way, ``_Search.no_shorter_isolation``) proves it shortest, or else breadth-first search
(nearest switches first, then every switch) finds the shortest. Restoration: A* back to the
normal state with the number of switches out of their normal position (plus jumpers in
place) as the heuristic, which is exact for the usual plan. Since ``trip_not_isolated`` also
covers an output reconnected while an input of its device carries other than its normal
current, the restoration closes the CT circuits before the trips. Temporary jumpers are tried
only when switches alone cannot do it, at terminal-block points: for each CT, between the
terminal-block terminals nearest its two terminals in use (the CT's own terminals where no
terminal block is recorded on the way).
"""

from __future__ import annotations

import heapq
import itertools
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
from analysis.engine.state import (
    PROBE_ZERO_A,
    ProcedureError,
    State,
    StateEval,
    apply_op,
    check_bypassed,
    check_trip,
    evaluate_states,
    normal_state,
)
from analysis.engine.topology import components

MAX_STATES = 20_000
# Edges solved per batch inside one layer of the search.
CHUNK = 256
# States the proof that a near plan is shortest may solve (``_Search.no_shorter_isolation``).
PROOF_BUDGET = 2_000
# States the fast (greedy) search may solve before the exact one takes over.
GREEDY_STATES = 2_000


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
        self.greedy_exhausted = False

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

    def outputs_open(self, ev: StateEval) -> bool:
        return not any(ev.out_connected[o.index] for o in self.nl.devices[self.device].outputs)

    def inputs_dead(self, ev: StateEval) -> bool:
        dev = self.nl.devices[self.device]
        return all(abs(ev.inp_probe[i.index]) < PROBE_ZERO_A for i in dev.inputs)

    def isolated(self, ev: StateEval) -> bool:
        return self.outputs_open(ev) and self.inputs_dead(ev)

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
        """Switches out of their normal position plus jumpers in place: a lower bound on the
        operations back to the normal state that one operation changes by at most 1."""
        n = sum(1 for a, b in zip(st.positions, self.start.positions, strict=True) if a != b)
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
        heap: list[tuple[int, int, int, State, dict[str, Any], State | None, State]] = []
        seq = itertools.count()

        def expand(st: State, g: int) -> None:
            for op in self.moves(st, jumpers, switches):
                trans, after = apply_op(self.nl, st, op, 0)
                if after not in parent:
                    # With a heuristic, equal f goes deeper first (any order of equal f keeps
                    # A* exact with a consistent h); without one, level by level.
                    depth = -(g + 1) if h is not None else g + 1
                    item = (g + 1 + hfun(after), depth, next(seq), st, op, trans, after)
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
                self.eval([s for e in chunk for s in (e[3], e[5], e[6]) if s is not None])
                for _f, _g, _n, st, op, trans, after in chunk:
                    if after in parent:
                        continue
                    before = self.cache[st]
                    if trans is not None and self.dangerous(before, self.cache[trans]):
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

    def left_to_isolate(self, ev: StateEval) -> int:
        """Outputs of the device still connected plus its inputs still carrying current."""
        dev = self.nl.devices[self.device]
        return sum(ev.out_connected[o.index] for o in dev.outputs) + sum(
            abs(ev.inp_probe[i.index]) >= PROBE_ZERO_A for i in dev.inputs
        )

    def greedy(self, goal: Any, limit: int = GREEDY_STATES) -> list[dict[str, Any]] | None:
        """A safe isolating sequence, found fast and not necessarily shortest: best-first
        search that always goes on from the state with the fewest outputs connected and
        inputs carrying current (``left_to_isolate``; ties: the state reached first), every
        edge checked as in ``search``. None when none is found within ``limit`` states
        (``greedy_exhausted`` then says whether every safely reachable state was seen)."""
        origin = self.start
        parent: dict[State, tuple[State, dict[str, Any]] | None] = {origin: None}
        if goal(origin, self.start_ev):
            return []
        seq = itertools.count(1)
        heap: list[tuple[int, int, State]] = [(self.left_to_isolate(self.start_ev), 0, origin)]
        spent = 0
        while heap:
            st = heapq.heappop(heap)[2]
            edges = []
            for op in self.moves(st, []):
                trans, after = apply_op(self.nl, st, op, 0)
                if after not in parent:
                    edges.append((op, trans, after))
            spent += len(edges)
            if spent > limit:
                self.greedy_exhausted = False
                return None
            self.eval([s for e in edges for s in (e[1], e[2]) if s is not None])
            before = self.cache[st]
            for op, trans, after in edges:
                if after in parent:
                    continue
                if trans is not None and self.dangerous(before, self.cache[trans]):
                    continue
                aev = self.cache[after]
                if self.dangerous(before, aev):
                    continue
                parent[after] = (st, op)
                if goal(after, aev):
                    return _path(parent, after)
                heapq.heappush(heap, (self.left_to_isolate(aev), next(seq), after))
        # every state reachable by safe operations has been seen: no sequence exists
        self.greedy_exhausted = True
        return None

    def min_changes(self, switches: list[str], pred: Any, cap: int, budget: list[int]) -> int:
        """Fewest switches moved from the normal state (each to any other position, in any
        order, no check on the way) that make ``pred`` hold, or ``cap + 1`` when no set of up
        to ``cap`` does; raises ``_OverBudget`` when that takes more than ``budget`` states."""
        if pred(self.start_ev):
            return 0
        base = dict(self.start.positions)
        for k in range(1, min(cap, len(switches)) + 1):
            states = []
            for combo in itertools.combinations(switches, k):
                alts = [[p for p in self.nl.switches[c].positions if p != base[c]] for c in combo]
                for choice in itertools.product(*alts):
                    pos = dict(base)
                    pos.update(zip(combo, choice, strict=True))
                    states.append(replace(self.start, positions=tuple(pos.items())))
            budget[0] -= len(states)
            if budget[0] < 0:
                raise _OverBudget
            for c0 in range(0, len(states), 4 * CHUNK):
                if any(pred(ev) for ev in self.eval(states[c0 : c0 + 4 * CHUNK])):
                    return k
        return cap + 1

    def no_shorter_isolation(self, length: int) -> bool:
        """True when no sequence of fewer than ``length`` switch operations can isolate the
        device, safe or not. The outputs' connection depends only on switches with a contact
        in the outputs' conducting parts (A), the inputs' currents only on those with a
        contact in the inputs' parts (B); a sequence moves at least a switches of A and b of
        B (a, b: the fewest that open the outputs, resp. kill the input currents), so at least
        a + b operations when A and B share no switch, max(a, b) otherwise. The last state of
        a safe sequence also leaves every live CT closed, so a and b count only the sets
        that do that too."""
        nl = self.nl
        lab = _union_labels(nl)
        dev = nl.devices[self.device]
        out_parts = {int(lab[t]) for o in dev.outputs for t in (o.terminal, o.target)}
        in_parts = {int(lab[t]) for i in dev.inputs for t in (i.a, i.b)}

        def touching(parts: set[int]) -> list[str]:
            return [
                c
                for c in self.order
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
    """The shortest safe isolating sequence, fast where that can be proven.

    1. ``greedy`` finds a sequence; it is returned when ``no_shorter_isolation`` proves that
       none is shorter. A greedy search that has seen every safely reachable state without
       reaching the goal proves that there is none.
    2. Otherwise breadth-first search over the nearest ring of switches (``_rings``), then
       the next ring, each plan found with the same proof, and finally over every switch.
    With temporary jumpers, or when the greedy search gives up, breadth-first search over
    every switch at once (the exhaustive search)."""
    if jumpers:
        return search.search(search.start, goal, jumpers)
    fast = search.greedy(goal)
    if fast is None:
        return None if search.greedy_exhausted else search.search(search.start, goal, [])
    if search.no_shorter_isolation(len(fast)):
        return fast
    for ring in _rings(search.nl, search.device, search.order):
        plan = search.search(search.start, goal, [], ring)
        if plan is None:
            continue
        if len(ring) == len(search.order) or search.no_shorter_isolation(len(plan)):
            return plan
        break
    return search.search(search.start, goal, [])


def plan_isolation(netlist: Netlist, device: str) -> IsolationPlan:
    """Shortest safe sequence that isolates ``device`` and the sequence that restores it.

    Search over switch positions (then temporary jumpers at terminal-block points), every
    transition checked (see the module docstring and ``_shortest_isolation``); the
    restoration by A* back to the normal state. ``possible`` is False when no such sequence
    exists; ``jumpers_needed`` then names where temporary jumpers would go.
    """
    if device not in netlist.devices:
        raise ProcedureError(f"unknown device {device!r}")
    dev0 = netlist.devices[device]
    if not dev0.inputs and not dev0.outputs:
        return IsolationPlan(
            netlist.site_code,
            device,
            False,
            (),
            (),
            (),
            check_operations(netlist, [], (device,)),
            reason=f"{device} has no inputs or outputs to isolate",
        )
    seeds, _ = touched_terminals(netlist, [], (device,))
    nl = subnet(netlist, region_mask(netlist, seeds, []))
    search = _Search(nl, device)
    start = search.start

    def goal_isolated(_st: State, ev: StateEval) -> bool:
        return search.isolated(ev)

    def goal_normal(st: State, _ev: StateEval) -> bool:
        return st.positions == start.positions and not st.jumpers

    candidates = _jumper_candidates(nl, search.start_ev)
    isolate = restore = None
    for jumpers in ([], candidates):
        if jumpers is candidates and not candidates:
            break
        isolate = _shortest_isolation(search, goal_isolated, jumpers)
        if isolate is not None:
            end = start
            for n, op in enumerate(isolate, start=1):
                _, end = apply_op(nl, end, op, n)
            restore = search.search(end, goal_normal, jumpers, h=search.away_from_normal)
            if restore is not None:
                break
        isolate = restore = None

    if isolate is None or restore is None:
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
        empty = check_operations(netlist, [], (device,))
        return IsolationPlan(
            netlist.site_code,
            device,
            False,
            (),
            (),
            (),
            empty,
            jumpers_needed=needed,
            reason=reason,
        )

    end = start
    for n, op in enumerate(isolate, start=1):
        _, end = apply_op(nl, end, op, n)
    end_ev = search.eval([end])[0]
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
    verdict = check_operations(netlist, [*isolate, *restore], (device,))
    return IsolationPlan(
        site=netlist.site_code,
        device=device,
        possible=True,
        isolate=tuple(isolate),
        restore=tuple(restore),
        affected=affected,
        verdict=verdict,
    )
