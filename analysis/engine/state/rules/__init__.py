"""The state finding rules, one module each, in the order ``state_findings`` runs them.

To add a rule: write a module here with its check and a ``RULE = Rule(...)`` (``registry``),
add its finding code to ``analysis/engine/findings.py``, and list it in ``RULES`` below."""

from __future__ import annotations

from typing import Any

from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.state.rules import bypassed, grounds, open_secondary, partial_winding, trip
from analysis.engine.state.rules.registry import Rule, StateCheck, finding_key, run_rules
from analysis.engine.state.solve import StateEval

RULES: tuple[Rule, ...] = (
    open_secondary.RULE,
    trip.RULE,
    bypassed.RULE,
    partial_winding.RULE,
    grounds.RULE,
)

ALWAYS_REPORTED = frozenset({fc.OPEN_SECONDARY, fc.TRIP_NOT_ISOLATED})


def state_findings(
    nl: Netlist,
    base: StateEval,
    before: StateEval,
    ev: StateEval,
    work: frozenset[str],
    stage: str | None,
    skip: set[tuple[Any, ...]] | None = None,
    keys: set[tuple[Any, ...]] | None = None,
) -> list[Finding]:
    """Every state check of the findings table for ``ev`` (compared with ``before`` for the
    trip rules and with ``base``, the starting state, for bypassed inputs).

    ``keys`` (if given) collects the key of every finding that holds; findings other than
    ``open_secondary`` and ``trip_not_isolated`` whose key is in ``skip`` are left out."""
    return run_rules(RULES, nl, StateCheck(base, before, ev, work, stage, skip, keys))


__all__ = ["ALWAYS_REPORTED", "RULES", "Rule", "StateCheck", "finding_key", "state_findings"]
