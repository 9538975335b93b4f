"""``manage.py check_procedure SITE PROCEDURE [--json]`` (or ``--file FILE PROCEDURE``): simulate
a stored procedure step by step, every transition included, and print the verdict."""

from __future__ import annotations

from analysis import engine
from analysis.management.base import SiteBodyCommand
from analysis.textout import verdict_text


class Command(SiteBodyCommand):
    help = "Check an isolation procedure for open CT secondaries and unisolated trips."
    thing = "procedure"

    def body(self, doc: dict, name: str) -> dict:
        netlist = engine.build_netlist(doc)
        return engine.check_procedure(netlist, name).to_json(doc["site"]["code"])

    text = staticmethod(verdict_text)
