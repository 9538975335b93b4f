"""Circuit states, the operations of a procedure, and the state checks, in three parts:

- ``operations``: the ``State`` of a circuit and what each operation of a procedure does to it;
- ``solve``: many states of one netlist solved in one batch (``evaluate_states``), and what
  the rules read of a solved state (``StateEval``);
- ``rules``: one module per finding rule, run in the order of their registry
  (``state_findings``).
"""

from analysis.engine.state.operations import (
    ProcedureError,
    State,
    apply_op,
    names_for,
    normal_state,
    op_kind,
    record_names,
    validate_op,
)
from analysis.engine.state.rules import ALWAYS_REPORTED, RULES, finding_key, state_findings
from analysis.engine.state.rules.bypassed import check_bypassed
from analysis.engine.state.rules.common import (
    APPEAR_FROM,
    APPEAR_TO,
    BYPASS_NOW,
    CHANGE_FRACTION,
    input_roles_of,
)
from analysis.engine.state.rules.grounds import check_grounds
from analysis.engine.state.rules.open_secondary import check_open_secondary
from analysis.engine.state.rules.partial_winding import check_partial
from analysis.engine.state.rules.trip import check_trip
from analysis.engine.state.solve import (
    INSIDE_SHORT_FRACTION,
    StateEval,
    evaluate_groups,
    evaluate_states,
)

__all__ = [
    "ALWAYS_REPORTED",
    "APPEAR_FROM",
    "APPEAR_TO",
    "BYPASS_NOW",
    "CHANGE_FRACTION",
    "INSIDE_SHORT_FRACTION",
    "RULES",
    "ProcedureError",
    "State",
    "StateEval",
    "apply_op",
    "check_bypassed",
    "check_grounds",
    "check_open_secondary",
    "check_partial",
    "check_trip",
    "evaluate_groups",
    "evaluate_states",
    "finding_key",
    "input_roles_of",
    "names_for",
    "normal_state",
    "op_kind",
    "record_names",
    "state_findings",
    "validate_op",
]
