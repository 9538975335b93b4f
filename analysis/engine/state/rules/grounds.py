"""Rules ``no_ground`` and ``multiple_grounds``: one ground point per secondary circuit."""

from __future__ import annotations

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
    b, r = ev._b, ev._row
    ct_circ = b.ct_circ[r]
    if not len(ct_circ):
        return []
    base = ct_circ.min()
    glab = b.node_circ[b.gnode[r]]
    gpoint = b.gpoint[r]
    key = (
        "grounds",
        (ct_circ - base).tobytes(),
        (glab - base).tobytes(),
        (gpoint - (gpoint.min() if len(gpoint) else 0)).tobytes(),
    )
    found = nl.cache.get(key)
    if found is None:
        found = nl.cache[key] = _ground_findings(ev)
    return [
        Finding(code=code, message=message, circuit=cid, stage=stage, numbers={"ground_points": n})
        for code, message, cid, n in found
    ]


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
