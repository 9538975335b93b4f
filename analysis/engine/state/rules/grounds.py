"""Rules ``no_ground`` and ``multiple_grounds``: one ground point per secondary circuit."""

from __future__ import annotations

from typing import Any

import numpy as np

from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.state.rules.registry import Rule
from analysis.engine.state.solve import StateEval


def check_grounds(nl: Netlist, ev: StateEval, stage: str | None) -> list[Finding]:
    """``no_ground`` / ``multiple_grounds``: one ground point per secondary circuit.

    The answer depends only on which CTs and ground terminals share a circuit and which
    ground terminals share a point, so it is worked out once per such pattern (most states
    of a procedure share their starting state's) and kept on the netlist."""
    b = ev._b
    if not b.ct_circ.shape[1]:
        return []
    keys: list[bytes] | None = b.cache.get("ground_keys")
    if keys is None:
        keys = b.cache["ground_keys"] = _pattern_keys(b)
    key = ("grounds", keys[ev._row])
    found = nl.cache.get(key)
    if found is None:
        found = nl.cache[key] = _ground_findings(ev)
    return [
        Finding(code=code, message=message, circuit=cid, stage=stage, numbers={"ground_points": n})
        for code, message, cid, n in found
    ]


def _pattern_keys(b: Any) -> list[bytes]:
    """Per state of a solved batch: which CTs and ground terminals share a circuit and which
    ground terminals share a point, as bytes (labels counted from the state's lowest)."""
    cbase = b.ct_circ.min(axis=1, keepdims=True)
    gpoint = b.gpoint
    pbase = gpoint.min(axis=1, keepdims=True) if gpoint.shape[1] else 0
    rows = np.ascontiguousarray(
        np.concatenate([b.ct_circ - cbase, b.node_circ[b.gnode] - cbase, gpoint - pbase], axis=1)
    )
    return [row.tobytes() for row in rows]


def _ground_findings(ev: StateEval) -> list[tuple[str, str, str, int]]:
    """(code, message, circuit, ground points) of every circuit of ``ev`` grounded at other
    than one point."""
    out = []
    for lab, cid in ev.circ_id.items():
        pts = ev.circ_grounds.get(lab, [])
        if not pts:
            out.append((fc.NO_GROUND, f"circuit {cid} has no ground point", cid, 0))
        elif len(pts) > 1:
            out.append(
                (
                    fc.MULTIPLE_GROUNDS,
                    f"circuit {cid} is grounded at {len(pts)} points "
                    f"({', '.join(pts)}); it should be grounded at one",
                    cid,
                    len(pts),
                )
            )
    return out


RULE = Rule(
    name="grounds",
    codes=(fc.NO_GROUND, fc.MULTIPLE_GROUNDS),
    check=lambda nl, c: check_grounds(nl, c.ev, c.stage),
    skip="by_key",
)
