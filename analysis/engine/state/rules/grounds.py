"""Rules ``no_ground`` and ``multiple_grounds``: one ground point per secondary circuit."""

from __future__ import annotations

from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.state.rules.registry import Rule
from analysis.engine.state.solve import StateEval


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


RULE = Rule(
    name="grounds",
    codes=(fc.NO_GROUND, fc.MULTIPLE_GROUNDS),
    check=lambda nl, c: check_grounds(nl, c.ev, c.stage),
    skip="by_key",
)
