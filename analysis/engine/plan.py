"""Safe isolation plans: the shortest operation sequence that takes a device out of service.

Method: breadth-first search over circuit states (switch positions and temporary jumpers),
level by level, every level's new states solved in one batch. The search is pruned to the
switches of the device's circuits and trip paths (the procedure region). An edge (one
operation) is allowed only when neither its transition nor its after state has a danger
finding (``open_secondary`` on a CT that was not already open, ``trip_not_isolated``), the
device being the one the work is for. The goal: every output of the device disconnected from
its target and no current in any of its inputs whatever the CTs drive (the probe column of
``state.evaluate_states``). Then the same search from there back to the normal state gives the
restoration. Temporary jumpers are tried only when switches alone cannot do it, at
terminal-block points: for each CT, between the terminal-block terminals nearest its two
terminals in use (the CT's own terminals where no terminal block is recorded on the way).
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass
from typing import Any

import numpy as np

from analysis.engine.cautions import cautions
from analysis.engine.netlist import Netlist
from analysis.engine.procedure import (
    ProcedureVerdict,
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
        self.open0 = self.start_ev.live_open
        self.order = _switch_order(nl)

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

    def isolated(self, ev: StateEval) -> bool:
        dev = self.nl.devices[self.device]
        if any(ev.out_connected[o.index] for o in dev.outputs):
            return False
        return all(abs(ev.inp_probe[i.index]) < PROBE_ZERO_A for i in dev.inputs)

    def moves(self, st: State, jumpers: list[tuple[str, str]]) -> list[dict[str, Any]]:
        ops: list[dict[str, Any]] = []
        pos = dict(st.positions)
        for code in self.order:
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

    def bfs(
        self, origin: State, goal: Any, jumpers: list[tuple[str, str]]
    ) -> list[dict[str, Any]] | None:
        parent: dict[State, tuple[State, dict[str, Any]] | None] = {origin: None}
        frontier = [origin]
        if goal(origin, self.eval([origin])[0]):
            return []
        while frontier and len(parent) < MAX_STATES:
            edges: list[tuple[State, dict[str, Any], State | None, State]] = []
            for st in frontier:
                for op in self.moves(st, jumpers):
                    trans, after = apply_op(self.nl, st, op, 0)
                    if after not in parent:
                        edges.append((st, op, trans, after))
            need = [s for e in edges for s in (e[0], e[2], e[3]) if s is not None]
            self.eval(need)
            nxt: list[State] = []
            found: State | None = None
            for st, op, trans, after in edges:
                if after in parent:
                    continue
                before = self.cache[st]
                if trans is not None and self.dangerous(before, self.cache[trans]):
                    continue
                aev = self.cache[after]
                if self.dangerous(before, aev):
                    continue
                parent[after] = (st, op)
                nxt.append(after)
                if found is None and goal(after, aev):
                    found = after
            if found is not None:
                path: list[dict[str, Any]] = []
                cur: State = found
                while parent[cur] is not None:
                    prev, op = parent[cur]  # type: ignore[misc]
                    path.append(op)
                    cur = prev
                return path[::-1]
            frontier = nxt
        return None


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


def plan_isolation(netlist: Netlist, device: str) -> IsolationPlan:
    """Shortest safe sequence that isolates ``device`` and the sequence that restores it.

    Breadth-first search over switch positions (then temporary jumpers at terminal-block
    points), every transition checked (see the module docstring). ``possible`` is False when
    no such sequence exists; ``jumpers_needed`` then names where temporary jumpers would go.
    """
    if device not in netlist.devices:
        raise ProcedureError(f"unknown device {device!r}")
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
        isolate = search.bfs(start, goal_isolated, jumpers)
        if isolate is not None:
            end = start
            for n, op in enumerate(isolate, start=1):
                _, end = apply_op(nl, end, op, n)
            restore = search.bfs(end, goal_normal, jumpers)
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
