"""Step-by-step check of an isolation procedure.

Every state the procedure passes through is solved (``state.evaluate_states``, one batch for
the whole procedure) and checked for every state finding of the design's table. Reporting:
``open_secondary`` and ``trip_not_isolated`` are reported in every state where they hold; the
others only in the state where they first appear (not already present in the state before the
step, nor in the step's own transition). Step 0 lists the findings of the starting state.

Only the part of the site the procedure can affect is simulated: the connected parts (over
every link, contact, wire, input and winding, whatever its state) that hold a terminal the
procedure touches or a terminal of a device the work is for, plus the trip paths of the
devices found there.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from analysis.engine import findings as fc
from analysis.engine.cautions import cautions
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist, region
from analysis.engine.readings import readings_of
from analysis.engine.state import (
    ProcedureError,
    State,
    StateEval,
    apply_op,
    evaluate_groups,
    evaluate_states,
    finding_key,
    names_for,
    normal_state,
    op_kind,
    state_findings,
)
from analysis.engine.topology import components
from analysis.engine.windings import winding_arrays, winding_subset
from siterules.procedure_refs import Problem, procedure_problems


@dataclass(frozen=True, slots=True)
class StepResult:
    """The findings of one step (step 0: the starting state, ``op`` None)."""

    step: int
    op: dict[str, Any] | None
    findings: tuple[Finding, ...]
    readings: tuple[dict[str, Any], ...] = ()

    def to_json(self) -> dict[str, Any]:
        """The step as the verdict JSON shows it (``readings``: what a clamp meter would read
        on each device input and shorting path after the step; ``readings.state_readings``)."""
        return {
            "step": self.step,
            "op": self.op,
            "findings": [f.to_json() for f in self.findings],
            "readings": list(self.readings),
        }


@dataclass(frozen=True, eq=False)
class ProcedureVerdict:
    """The verdict of a procedure (design.md, "Procedure verdict JSON")."""

    site: str
    procedure: str | None
    devices: tuple[str, ...]
    steps: tuple[StepResult, ...]

    @property
    def findings(self) -> list[tuple[int, Finding]]:
        return [(s.step, f) for s in self.steps for f in s.findings]

    @property
    def first_danger(self) -> dict[str, Any] | None:
        for step, f in self.findings:
            if f.severity == fc.DANGER:
                return {
                    "step": step,
                    "stage": f.stage,
                    "code": f.code,
                    "ct": f.ct,
                    "device": f.device,
                    "input": f.input,
                }
        return None

    @property
    def safe(self) -> bool:
        return self.first_danger is None

    def to_json(self, site: str | None = None) -> dict[str, Any]:
        """design.md's procedure verdict JSON, with the safety cautions."""
        return {
            "site": site if site is not None else self.site,
            "procedure": self.procedure,
            "safe": self.safe,
            "first_danger": self.first_danger,
            "steps": [s.to_json() for s in self.steps],
            "cautions": cautions(),
        }


# ---------------------------------------------------------------------------------------------
# region


def _union_labels(nl: Netlist) -> np.ndarray:
    hit = nl.cache.get("union_labels")
    if hit is None:
        ar = nl.arrays
        a = np.concatenate([ar.link_a, ar.contact_a, ar.br_a, ar.wind_a])
        b = np.concatenate([ar.link_b, ar.contact_b, ar.br_b, ar.wind_b])
        hit = nl.cache["union_labels"] = components(nl.n_terminals, a, b)
    return hit


def _device_terminals(nl: Netlist, code: str) -> list[int]:
    dev = nl.devices[code]
    return [t for i in dev.inputs for t in (i.a, i.b)] + [
        t for o in dev.outputs for t in (o.terminal, o.target)
    ]


def touched_terminals(
    nl: Netlist, ops: list[dict[str, Any]], devices: tuple[str, ...]
) -> tuple[set[int], list[tuple[int, int]]]:
    """Terminals the operations act on, and the jumpers they add."""
    seeds: set[int] = set()
    jumps: list[tuple[int, int]] = []
    for d in devices:
        seeds.update(_device_terminals(nl, d))
    for op in ops:
        kind = op_kind(op)
        if kind == "set":
            for c in nl.switches[str(op["set"])].contacts:
                seeds.update((c.a, c.b))
        elif kind == "add_jumper":
            a, b = nl.index[op["add_jumper"][0]], nl.index[op["add_jumper"][1]]
            seeds.update((a, b))
            jumps.append((a, b))
        elif kind in ("lift", "land"):
            seeds.update(nl.index[t] for t in op[kind])
        elif kind in ("remove_device", "insert_device"):
            seeds.update(_device_terminals(nl, str(op[kind])))
        elif kind in ("deenergize", "energize"):
            for ct in nl.ct_list:
                if ct.equipment == str(op[kind]):
                    seeds.update(ct.terminals.values())
    return seeds, jumps


def _device_labels(nl: Netlist) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(device of each input terminal, its union label, device of each output terminal and
    target, its union label), devices numbered in ``nl.devices`` order (cached)."""
    hit = nl.cache.get("device_labels")
    if hit is None:
        lab = _union_labels(nl)
        ar = nl.arrays
        dev_no = {code: k for k, code in enumerate(nl.devices)}
        in_dev = np.fromiter((dev_no[i.device] for i in nl.inputs), np.int64, len(nl.inputs))
        out_dev = np.fromiter((dev_no[o.device] for o in nl.outputs), np.int64, len(nl.outputs))
        hit = nl.cache["device_labels"] = (
            np.concatenate([in_dev, in_dev]),
            lab[np.concatenate([ar.br_a[ar.n_wires :], ar.br_b[ar.n_wires :]])],
            np.concatenate([out_dev, out_dev]),
            lab[np.concatenate([ar.out_terminal, ar.out_target])],
        )
    return hit


def region_mask(nl: Netlist, seeds: set[int], jumps: list[tuple[int, int]]) -> np.ndarray:
    """Terminals of the connected parts holding a seed (jumpers join parts), plus the trip
    paths of every device with a terminal there."""
    lab = _union_labels(nl)
    parent: dict[int, int] = {}

    def find(x: int) -> int:
        while parent.get(x, x) != x:
            x = parent[x]
        return x

    for a, b in jumps:
        ra, rb = find(int(lab[a])), find(int(lab[b]))
        if ra != rb:
            parent[ra] = rb
    # root of every part: itself, or the part a jumper joins it to
    root = np.arange(int(lab.max()) + 1 if len(lab) else 0, dtype=np.int64)
    for x in parent:
        root[x] = find(x)
    chosen = np.zeros(len(root), dtype=bool)
    chosen[root[lab[np.fromiter(seeds, np.int64, len(seeds))]]] = True
    in_dev, in_lab, out_dev, out_lab = _device_labels(nl)
    in_root, out_root = root[in_lab], root[out_lab]
    hit_dev = np.zeros(len(nl.devices), dtype=bool)
    while True:
        hit_dev[in_dev[chosen[in_root]]] = True
        reach = out_root[hit_dev[out_dev]]
        if chosen[reach].all():
            break
        chosen[reach] = True
    return chosen[root][lab]


def subnet(nl: Netlist, mask: np.ndarray) -> Netlist:
    """The netlist of the terminals in ``mask`` (elements outside it left out): a view over the
    site's netlist (``netlist.region``), cached per mask."""
    if mask.all():
        return nl
    key = ("subnet", mask.tobytes())
    hit = nl.cache.get(key)
    if hit is None:
        hit = nl.cache[key] = region(nl, mask)
        # the region's tapped windings are the site's cut, not worked out again
        term_map = np.full(nl.n_terminals, -1, dtype=np.int64)
        term_map[np.fromiter((nl.index[t] for t in hit.terminals), np.int64, hit.n_terminals)] = (
            np.arange(hit.n_terminals)
        )
        ct_map = np.full(len(nl.ct_list), -1, dtype=np.int64)
        ct_map[[nl.cts[c].index for c in hit.cts]] = np.arange(len(hit.cts))
        hit.cache["windings"] = winding_subset(winding_arrays(nl), ct_map, term_map)
    return hit


# ---------------------------------------------------------------------------------------------
# simulation


def simulate(
    nl: Netlist, ops: list[dict[str, Any]], start: State | None = None
) -> list[tuple[tuple[State, ...], State]]:
    """(states passed on the way, after) of every operation, from ``start`` (the normal
    state)."""
    st = start if start is not None else normal_state(nl)
    # each operation's names checked at once (``validate_op``), raised when its turn comes
    bad: dict[int | None, list[Problem]] = {}
    for p in procedure_problems(names_for(nl, ops), ops, sequence=False):
        bad.setdefault(p.step, []).append(p)
    out = []
    for n, op in enumerate(ops, start=1):
        if n - 1 in bad:
            raise ProcedureError.of(bad[n - 1])
        trans, st = apply_op(nl, st, op, n, validated=True)
        out.append((trans, st))
    return out


def verdict_from_evals(
    nl: Netlist,
    ops: list[dict[str, Any]],
    work: frozenset[str],
    init: StateEval,
    steps: list[tuple[tuple[StateEval, ...], StateEval]],
    *,
    code: str | None,
) -> ProcedureVerdict:
    """Apply the reporting rule to solved states. A step that passes several states on the
    way (a multi-position switch) reports each finding of its transition stage once."""
    keys0: set[tuple[Any, ...]] = set()
    raw0 = state_findings(nl, init, init, init, work, "before", None, keys0)
    reads = readings_of(nl, [init, *(aev for _, aev in steps)])
    results = [StepResult(0, None, tuple(raw0), tuple(reads[0]))]
    before_ev, before_keys = init, keys0
    for n, (op, (tevs, aev)) in enumerate(zip(ops, steps, strict=True), start=1):
        kept: list[Finding] = []
        trans_keys: set[tuple[Any, ...]] = set()
        seen: set[tuple[Any, ...]] = set()
        for tev in tevs:
            for f in state_findings(
                nl, init, before_ev, tev, work, "transition", before_keys | trans_keys, trans_keys
            ):
                if finding_key(f) not in seen:
                    seen.add(finding_key(f))
                    kept.append(f)
        after_keys: set[tuple[Any, ...]] = set()
        kept += state_findings(
            nl, init, before_ev, aev, work, "after", before_keys | trans_keys, after_keys
        )
        results.append(StepResult(n, op, tuple(kept), tuple(reads[n])))
        before_ev, before_keys = aev, after_keys
    return ProcedureVerdict(
        site=nl.site_code, procedure=code, devices=tuple(sorted(work)), steps=tuple(results)
    )


@dataclass(eq=False)
class _Prepared:
    """A procedure simulated and ready to solve: the netlist it is solved on (its region of
    the site), its operations and every state they pass, in order (the starting state first),
    and the reference states the rules compare with (``_reference_states``) after them."""

    site: str
    nl: Netlist
    ops: list[dict[str, Any]]
    devices: tuple[str, ...]
    code: str | None
    sim: list[tuple[tuple[State, ...], State]]
    states: list[State]
    n_checked: int
    normal_start: bool


def _prepare(
    netlist: Netlist,
    ops: list[dict[str, Any]],
    devices: tuple[str, ...],
    code: str | None,
    start: State | None,
    prefix: tuple[str | int, ...],
) -> _Prepared:
    """Refuse a procedure that names what the site does not have, cut the site to the
    procedure's region and simulate every operation (``ProcedureError`` as
    ``check_operations`` says)."""
    _refuse_problems(netlist, ops, devices, start, prefix)
    nl = netlist
    if start is None:
        seeds, jumps = touched_terminals(netlist, ops, devices)
        nl = subnet(netlist, region_mask(netlist, seeds, jumps))
    sim = simulate(nl, ops, start)
    init_state = start if start is not None else normal_state(nl)
    states: list[State] = [init_state]
    for passed, after in sim:
        states.extend(passed)
        states.append(after)
    n_checked = len(states)
    if start is None:
        states += _reference_states(nl, states)
    return _Prepared(
        netlist.site_code, nl, ops, devices, code, sim, states, n_checked, start is None
    )


def _reference_states(nl: Netlist, states: list[State]) -> list[State]:
    """The states the rules compare a procedure's states with, not yet solved on ``nl``: the
    normal state with the primary of each state (``StateEval.normal_ref``) and with every
    piece of equipment energized (``input_roles_of``). Solving them in the procedure's batch
    spares a solve each later; the figures are the same (each circuit is its own matrix)."""
    base = states[0]
    wanted = dict.fromkeys(st.energized for st in states)
    wanted[frozenset(nl.equipment)] = None
    out = []
    for energized in wanted:
        if ("normal_ref", energized) in nl.cache:
            continue
        ref = replace(base, energized=energized)
        if ref != base:
            out.append(ref)
    return out


def _finish(p: _Prepared, evs: list[StateEval]) -> ProcedureVerdict:
    """The verdict of a prepared procedure from its solved states."""
    nl = p.nl
    if p.normal_start:
        # the starting state is the normal one: the reference of the trip reconnection rule
        nl.cache.setdefault(("normal_ref", evs[0].state.energized), evs[0])
        for ev in evs[p.n_checked :]:
            nl.cache.setdefault(("normal_ref", ev.state.energized), ev)
    it = iter(evs[1 : p.n_checked])
    steps = []
    for passed, _after in p.sim:
        tevs = tuple(next(it) for _ in passed)
        steps.append((tevs, next(it)))
    v = verdict_from_evals(nl, p.ops, frozenset(p.devices), evs[0], steps, code=p.code)
    if v.site != p.site:
        v = ProcedureVerdict(p.site, v.procedure, v.devices, v.steps)
    return v


def check_operations(
    netlist: Netlist,
    ops: list[dict[str, Any]],
    devices: list[str] | tuple[str, ...] = (),
    *,
    code: str | None = None,
    start: State | None = None,
    prefix: tuple[str | int, ...] = (),
) -> ProcedureVerdict:
    """Check a list of operations from the normal state (an unsaved procedure).

    ``devices`` are the devices the work is for (rule (a) of ``trip_not_isolated``). Raises
    ``ProcedureError`` listing every step that names a switch, position, terminal, wire or
    link, device or equipment the site does not have, removes a jumper that is not in place,
    reuses the id of one that is, or lifts (lands) what is already lifted (landed): the rule
    of ``siterules.procedure_refs``, the one the site-file import applies. ``prefix`` is the
    JSON pointer of the procedure in its site document, for the messages.
    """
    p = _prepare(netlist, list(ops), tuple(devices), code, start, prefix)
    return _finish(p, evaluate_states(p.nl, p.states))


def check_procedure(netlist: Netlist, code: str) -> ProcedureVerdict:
    """Check the stored procedure ``code`` step by step (see the module docstring)."""
    proc = netlist.procedures.get(code)
    if proc is None:
        known = ", ".join(sorted(netlist.procedures)) or "none"
        raise ProcedureError(f"unknown procedure {code!r} (procedures: {known})")
    prefix = ("procedures", list(netlist.procedures).index(code))
    return check_operations(netlist, list(proc.steps), proc.devices, code=proc.code, prefix=prefix)


# Vertices (states × terminals) solved in one batch by ``check_procedures``: the site's
# procedures go in batches up to about this size, so memory stays small for a large region.
BATCH_VERTICES = 60_000


def check_procedures(
    netlist: Netlist,
    codes: list[str] | None = None,
    *,
    also: Sequence[tuple[Netlist, Sequence[State]]] = (),
) -> tuple[dict[str, ProcedureVerdict | ProcedureError], list[list[StateEval]]]:
    """``check_procedure`` of every stored procedure (or of ``codes``), their states solved
    together (``state.evaluate_groups``) in batches of up to ``BATCH_VERTICES``: the same
    verdicts, in one set of numpy calls instead of one per procedure. A procedure that
    cannot be simulated gets its ``ProcedureError`` instead of a verdict. ``also``: more
    (netlist, states) groups to solve in the first batch (the site's normal state, say);
    their solved states are returned beside the verdicts."""
    out: dict[str, ProcedureVerdict | ProcedureError] = {}
    ready: list[tuple[str, _Prepared]] = []
    for code in codes if codes is not None else list(netlist.procedures):
        proc = netlist.procedures.get(code)
        try:
            if proc is None:
                known = ", ".join(sorted(netlist.procedures)) or "none"
                raise ProcedureError(f"unknown procedure {code!r} (procedures: {known})")
            prefix = ("procedures", list(netlist.procedures).index(code))
            ready.append(
                (code, _prepare(netlist, list(proc.steps), proc.devices, proc.code, None, prefix))
            )
        except ProcedureError as exc:
            out[code] = exc
    extra = list(also)
    solved_extra: list[list[StateEval]] = []
    batch: list[tuple[str, _Prepared]] = []
    size = sum(n.n_terminals * len(sts) for n, sts in extra)

    def flush() -> None:
        nonlocal extra, size
        solved = evaluate_groups([*extra, *((p.nl, p.states) for _, p in batch)])
        solved_extra.extend(solved[: len(extra)])
        for (code, p), evs in zip(batch, solved[len(extra) :], strict=True):
            out[code] = _finish(p, evs)
        extra, size = [], 0
        batch.clear()

    for code, p in ready:
        n = p.nl.n_terminals * len(p.states)
        if batch and size + n > BATCH_VERTICES:
            flush()
        batch.append((code, p))
        size += n
    if batch or extra:
        flush()
    return {c: out[c] for c in (codes if codes is not None else netlist.procedures) if c in out}, (
        solved_extra
    )


def _refuse_problems(
    nl: Netlist,
    ops: list[dict[str, Any]],
    devices: tuple[str, ...],
    start: State | None,
    prefix: tuple[str | int, ...],
) -> None:
    """Raise ``ProcedureError`` with every problem of the procedure rule."""
    jumpers: list[str] = []
    lifted: list[frozenset[str]] = []
    if start is not None:
        jumpers = [j[0] for j in start.jumpers]
        lifted = [frozenset(nl.wires[k].ends) for k in start.lifted_wires]
        lifted += [frozenset(nl.links[k].ends) for k in start.lifted_links]
    problems = procedure_problems(
        names_for(nl, ops), ops, devices, prefix=prefix, jumpers=jumpers, lifted=lifted
    )
    if problems:
        raise ProcedureError.of(problems, prefix)
