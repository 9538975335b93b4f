"""``manage.py plan_isolation SITE DEVICE [--json]`` (or ``--file FILE DEVICE``): the shortest
safe sequence that isolates a device's trips and currents, and the way back."""

from __future__ import annotations

from analysis import engine
from analysis.management.base import SiteBodyCommand
from analysis.textout import plan_text


class Command(SiteBodyCommand):
    help = "Plan the isolation and restoration of a device, checked in every transition."
    thing = "device"

    def body(self, doc: dict, name: str) -> dict:
        netlist = engine.build_netlist(doc)
        return engine.plan_isolation(netlist, name).to_json(doc["site"]["code"])

    text = staticmethod(plan_text)
