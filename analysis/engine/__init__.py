"""Loopkeep's circuit engine: pure Python + numpy, no Django.

Public entries (see each docstring for the method):

- ``build_netlist(record)``: a site record (``record.SiteRecord``, or a ``loopkeep.site/1``
  dict) to a ``Netlist``;
- ``ct_burdens``, ``find_circuits``, ``input_feeds``: normal-state nodal analysis;
- ``check_procedure``, ``check_operations``: step-by-step procedure verdicts;
- ``plan_isolation``: the shortest safe isolation and restoration sequences;
- ``analyze_site``: all of the above for the fleet recompute.
"""

from analysis.engine.netlist import Netlist, build_netlist
from analysis.engine.nodal import (
    BurdenElement,
    Circuit,
    CTBurden,
    burden_map,
    ct_burdens,
    ct_burdens_many,
    find_circuits,
    input_feeds,
)
from analysis.engine.plan import IsolationPlan, plan_isolation
from analysis.engine.procedure import (
    ProcedureVerdict,
    StepResult,
    check_operations,
    check_procedure,
)
from analysis.engine.site import SiteAnalysis, analyze_site, normal_findings, release
from analysis.engine.state import ProcedureError, State, normal_state

__all__ = [
    "BurdenElement",
    "CTBurden",
    "Circuit",
    "IsolationPlan",
    "Netlist",
    "ProcedureError",
    "ProcedureVerdict",
    "SiteAnalysis",
    "State",
    "StepResult",
    "analyze_site",
    "build_netlist",
    "burden_map",
    "check_operations",
    "check_procedure",
    "ct_burdens",
    "ct_burdens_many",
    "find_circuits",
    "input_feeds",
    "normal_findings",
    "normal_state",
    "plan_isolation",
    "release",
]
