"""The procedures of a site solved together (issue 15, scope 2) give what each solved alone
gives, to the last bit: ``state.evaluate_groups`` shares the numpy calls, never a matrix
(common practice, no source: a batch is the same computation, so a speed-up cannot change
which step is flagged). The generated sites are invented data; the reference is the engine's
own unbatched path."""

from __future__ import annotations

import numpy as np
import pytest

from analysis.engine import build_netlist
from analysis.engine.procedure import (
    check_procedure,
    check_procedures,
    region_mask,
    subnet,
    touched_terminals,
)
from analysis.engine.state import ProcedureError, evaluate_groups, evaluate_states, normal_state
from analysis.engine.state.operations import apply_op
from analysis.engine.windings import winding_arrays
from fixtures.fleet import generate_site

SITES = (0, 5, 8, 12)


def _verdicts_alone(index: int) -> dict[str, object]:
    nl = build_netlist(generate_site(index, seed=1))
    out: dict[str, object] = {}
    for code in nl.procedures:
        try:
            v = check_procedure(nl, code)
            out[code] = (v.to_json(), [(s, f.numbers) for s, f in v.findings])
        except ProcedureError as exc:
            out[code] = str(exc)
    return out


@pytest.mark.parametrize("index", SITES)
def test_procedures_checked_together_give_the_verdicts_each_gives_alone(index):
    want = _verdicts_alone(index)
    nl = build_netlist(generate_site(index, seed=1))
    got, extra = check_procedures(nl, also=[(nl, [normal_state(nl)])])
    assert list(got) == list(want)
    for code, v in got.items():
        if isinstance(v, ProcedureError):
            assert str(v) == want[code]
        else:
            assert (v.to_json(), [(s, f.numbers) for s, f in v.findings]) == want[code]
    (normal,) = extra
    alone = evaluate_states(nl, [normal_state(nl)])[0]
    assert np.array_equal(normal[0]._b.inp_cur[0], alone._b.inp_cur[0])
    assert np.array_equal(normal[0]._b.inp_probe[0], alone._b.inp_probe[0])


def _states(nl, ops):
    st = normal_state(nl)
    out = [st]
    for n, op in enumerate(ops, start=1):
        passed, st = apply_op(nl, st, op, n)
        out += [*passed, st]
    return out


def test_a_batch_of_regions_solves_each_state_as_its_own_batch_would():
    nl = build_netlist(generate_site(5, seed=1))
    groups = []
    for proc in nl.procedures.values():
        seeds, jumps = touched_terminals(nl, list(proc.steps), proc.devices)
        sub = subnet(nl, region_mask(nl, seeds, jumps))
        groups.append((sub, _states(sub, list(proc.steps))))
    together = evaluate_groups(groups)
    for (sub, states), evs in zip(groups, together, strict=True):
        alone = evaluate_states(sub, states)
        for a, b in zip(evs, alone, strict=True):
            for name in ("inp_cur", "inp_probe", "inp_ref_a", "live", "ct_open", "out_connected"):
                assert np.array_equal(getattr(a._b, name)[a._row], getattr(b._b, name)[b._row])


def test_a_state_asked_twice_is_solved_once_with_the_same_figures():
    nl = build_netlist(generate_site(0, seed=1))
    proc = next(iter(nl.procedures.values()))
    seeds, jumps = touched_terminals(nl, list(proc.steps), proc.devices)
    sub = subnet(nl, region_mask(nl, seeds, jumps))
    states = _states(sub, list(proc.steps))
    doubled = [*states, *states]
    evs = evaluate_states(sub, doubled)
    assert evs[0]._b.inp_cur.shape[0] == len(set(states))
    for k, st in enumerate(states):
        (alone,) = evaluate_states(sub, [st])
        for ev in (evs[k], evs[k + len(states)]):
            assert ev.state == st
            assert np.array_equal(ev._b.inp_cur[ev._row], alone._b.inp_cur[0])
            assert ev.ct_open == alone.ct_open


@pytest.mark.parametrize("index", SITES)
def test_a_region_winding_arrays_are_the_site_ones_cut(index):
    nl = build_netlist(generate_site(index, seed=1))
    for proc in nl.procedures.values():
        seeds, jumps = touched_terminals(nl, list(proc.steps), proc.devices)
        sub = subnet(nl, region_mask(nl, seeds, jumps))
        if sub is nl:
            continue
        cut = sub.cache.pop("windings")
        worked = winding_arrays(sub)
        for field in worked.__dataclass_fields__:
            a, b = getattr(worked, field), getattr(cut, field)
            if isinstance(a, list):
                assert a == b, field
            else:
                assert a.dtype == b.dtype and np.array_equal(a, b), field
