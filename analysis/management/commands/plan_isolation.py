"""``manage.py plan_isolation SITE DEVICE [--json]`` (or ``--file FILE DEVICE``): the shortest
safe sequence that isolates a device's trips and currents, and the way back."""

from __future__ import annotations

from typing import Any

from analysis import actions
from analysis.management.base import EXIT_STATUS_HELP, SiteBodyCommand
from analysis.textout import plan_text


class Command(SiteBodyCommand):
    help = (
        "Plan the isolation and restoration of a device, checked in every transition. "
        + EXIT_STATUS_HELP.format(
            ok="for a possible plan",
            bad="when no safe plan is possible (the body says why and where jumpers would go)",
            thing="device",
        )
    )
    thing = "device"

    def body(self, doc: dict, name: str) -> dict:
        return actions.isolation_plan(doc, name)

    def unsafe(self, body: dict[str, Any]) -> str | None:
        verdict = body.get("verdict") or {}
        if body["possible"] and verdict.get("safe", True):
            return None
        if body["possible"]:
            return f"the isolation plan for {body['device']} does not pass its own check"
        reason = body.get("reason") or "no safe sequence found"
        return f"no safe isolation plan for {body['device']}: {reason}"

    text = staticmethod(plan_text)
