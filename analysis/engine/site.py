"""Everything the fleet recompute needs for one site, in one call."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.nodal import Circuit, CTBurden, NormalAnalysis, normal_analysis
from analysis.engine.procedure import ProcedureVerdict, check_procedures
from analysis.engine.state import (
    ProcedureError,
    StateEval,
    evaluate_states,
    normal_state,
    state_findings,
)


@dataclass(eq=False)
class SiteAnalysis:
    """Circuits, burdens, feeds and normal-state findings of a site, and the verdict of each
    stored procedure (or, for a procedure that cannot be simulated, the error)."""

    site: str
    circuits: list[Circuit]
    burdens: dict[str, CTBurden]
    feeds: dict[str, set[str]]
    findings: list[Finding]
    verdicts: dict[str, ProcedureVerdict] = field(default_factory=dict)
    procedure_errors: dict[str, str] = field(default_factory=dict)

    def burden_map(self) -> dict[str, dict[str, Any]]:
        """``{ct: {"ground_fault": z, "phase_fault": z}}`` for the ratings engine."""
        return {
            code: {"ground_fault": b.ground_fault, "phase_fault": b.phase_fault}
            for code, b in self.burdens.items()
        }


def normal_findings(netlist: Netlist, ev: StateEval | None = None) -> list[Finding]:
    """State findings of the normal state (open secondaries, partial winding shorts, ground
    points), as the findings list shows them (no procedure, no stage). ``ev``: the normal
    state already solved (``analyze_site`` solves it in the batch of the procedures)."""
    if ev is None:
        ev = evaluate_states(netlist, [normal_state(netlist)])[0]
    return state_findings(netlist, ev, ev, ev, frozenset(), None)


def analyze_site(netlist: Netlist) -> SiteAnalysis:
    """Normal-state nodal analysis (both fault cases, every CT), circuits, feeds, state
    findings, and every stored procedure checked step by step (the normal state and the
    states of every procedure solved in one batch, ``procedure.check_procedures``)."""
    na = normal_analysis(netlist)
    checked, (normal,) = check_procedures(netlist, also=[(netlist, [normal_state(netlist)])])
    out = SiteAnalysis(
        site=netlist.site_code,
        circuits=na.circuits,
        burdens=na.burdens,
        feeds=na.feeds(),
        findings=normal_findings(netlist, normal[0]),
    )
    for code, verdict in checked.items():
        if isinstance(verdict, ProcedureError):
            out.procedure_errors[code] = str(verdict)
        else:
            out.verdicts[code] = verdict
    return out


def release(netlist: Netlist) -> None:
    """Drop what ties a netlist's derived results back to it, once they are no longer needed:
    its cache (and the caches of the region netlists kept there) and the normal analysis's
    burdens (each ``CTBurden`` refers to its analysis). Those cycles are by design while the
    site is worked on; broken afterwards, reference counting frees the whole netlist at once,
    and the garbage collector does not have to find some ten thousand objects per site."""
    for value in netlist.cache.values():
        if isinstance(value, Netlist):
            release(value)
        elif isinstance(value, NormalAnalysis):
            value.burdens = {}
    netlist.cache.clear()
