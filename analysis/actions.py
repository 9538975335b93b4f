"""Answers computed now from a site document, shared by the command line and the API (one way
to compute each answer): a stored procedure's verdict, a draft procedure's verdict, and a
device's isolation plan. Each body carries the safety cautions (the engine adds them)."""

from __future__ import annotations

from typing import Any

from analysis import engine


def procedure_check(doc: dict[str, Any], procedure: str) -> dict[str, Any]:
    """The verdict JSON of the stored procedure ``procedure`` of ``doc``.

    Raises ``engine.ProcedureError`` for an unknown procedure or a step the engine cannot
    simulate (unknown switch, position, jumper, terminal, …)."""
    netlist = engine.build_netlist(doc)
    return engine.check_procedure(netlist, procedure).to_json(doc["site"]["code"])


def draft_check(
    doc: dict[str, Any], steps: list[dict[str, Any]], devices: list[str] | tuple[str, ...] = ()
) -> dict[str, Any]:
    """The verdict JSON of operations that are not stored (``procedure`` is null)."""
    netlist = engine.build_netlist(doc)
    return engine.check_operations(netlist, list(steps), tuple(devices)).to_json(
        doc["site"]["code"]
    )


def isolation_plan(doc: dict[str, Any], device: str) -> dict[str, Any]:
    """The isolation plan JSON of ``device``. Raises ``KeyError`` for an unknown device."""
    netlist = engine.build_netlist(doc)
    return engine.plan_isolation(netlist, device).to_json(doc["site"]["code"])
