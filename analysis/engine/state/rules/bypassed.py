"""Rule ``input_bypassed``: an input that saw the current of its CTs at the start no longer
sees it."""

from __future__ import annotations

from typing import Any

import numpy as np

from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.quantities import PROBE_ZERO_A
from analysis.engine.state.rules.common import BYPASS_NOW, _fmt_a, input_roles_of
from analysis.engine.state.rules.registry import Rule
from analysis.engine.state.solve import StateEval


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
        # the inputs lost in each state, as lists
        hit_rows: list[list[int]] = [[] for _ in range(lost.shape[0])]
        for r, k in zip(*(x.tolist() for x in np.nonzero(lost)), strict=True):
            hit_rows[r].append(k)
        batch_hit = bb["lost"] = (b, hit_rows)
    hits = batch_hit[1][ev._row]
    if not hits:
        return out
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


RULE = Rule(
    name="input_bypassed",
    codes=(fc.INPUT_BYPASSED,),
    check=lambda nl, c: check_bypassed(nl, c.base, c.ev, c.stage, c.skip, c.keys),
    skip="own",
)
