"""The registry of the state finding rules: each rule is a module of this package with a
``RULE`` (``Rule``), listed once in ``RULES`` (``rules/__init__.py``); ``state_findings`` runs
them in that order.

How a rule meets the reporting rule of a procedure (a finding that already held in an earlier
state is reported once; ``skip``/``keys`` of ``state_findings``) is the rule's ``skip``:

- ``"never"``: always reported (a live open CT, a trip not isolated: every state they hold in);
- ``"by_key"``: a finding whose ``finding_key`` is in ``skip`` is left out after the check;
- ``"own"``: the rule takes ``skip`` and ``keys`` itself (it can then leave out the work of
  building a finding it would drop).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.state.solve import StateEval


@dataclass(frozen=True, slots=True)
class StateCheck:
    """One state to check: ``ev``, compared with ``before`` (the trip rules) and with ``base``,
    the starting state (bypassed inputs); ``work``: the devices the procedure is for; ``stage``:
    the procedure stage the state belongs to (None for the normal state)."""

    base: StateEval
    before: StateEval
    ev: StateEval
    work: frozenset[str]
    stage: str | None
    skip: set[tuple[Any, ...]] | None = None
    keys: set[tuple[Any, ...]] | None = None


@dataclass(frozen=True, slots=True)
class Rule:
    """A state finding rule: its name, the finding codes it gives, the check, and how it meets
    the reporting rule (module docstring)."""

    name: str
    codes: tuple[str, ...]
    check: Callable[[Netlist, StateCheck], list[Finding]]
    skip: Literal["never", "by_key", "own"]


def finding_key(f: Finding) -> tuple[Any, ...]:
    """What makes two findings of different states "the same" for the reporting rule."""
    return (f.code, f.ct, f.device, f.input, f.circuit)


def run_rules(rules: tuple[Rule, ...], nl: Netlist, check: StateCheck) -> list[Finding]:
    """Every rule on one state, in order, with the reporting rule applied."""
    out: list[Finding] = []
    filtered: list[Finding] = []
    for rule in rules:
        found = rule.check(nl, check)
        if rule.skip == "by_key":
            filtered.extend(found)
        else:
            out.extend(found)
    # The rules whose findings are filtered by key come after the others, as the findings
    # table lists them.
    keys, skip = check.keys, check.skip
    for f in filtered:
        key = finding_key(f)
        if keys is not None:
            keys.add(key)
        if skip is None or key not in skip:
            out.append(f)
    if keys is not None:
        keys.update(finding_key(f) for f in out)
    return out
