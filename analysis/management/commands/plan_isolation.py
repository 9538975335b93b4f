"""``manage.py plan_isolation SITE DEVICE [--json]`` (or ``--file FILE DEVICE``): the shortest
safe sequence that isolates a device's trips and currents, and the way back."""

from __future__ import annotations

import json

from django.core.management.base import BaseCommand, CommandError

from analysis import engine
from analysis.sources import load_document, split_targets
from analysis.textout import plan_text


class Command(BaseCommand):
    help = "Plan the isolation and restoration of a device, checked in every transition."

    def add_arguments(self, parser) -> None:
        parser.add_argument("targets", nargs="+", metavar="SITE DEVICE")
        parser.add_argument("--file", help="plan on a site file instead of a stored site")
        parser.add_argument(
            "--json", action="store_true", dest="as_json", help="print the API's JSON body"
        )

    def handle(self, *args, targets: list[str], file: str | None, as_json: bool, **options):
        site, device = split_targets(targets, file=file, what="device")
        doc = load_document(site=site, file=file)
        netlist = engine.build_netlist(doc)
        try:
            plan = engine.plan_isolation(netlist, device).to_json(doc["site"]["code"])
        except (KeyError, engine.ProcedureError) as exc:
            raise CommandError(str(exc).strip('"')) from exc
        self.stdout.write(
            json.dumps(plan, indent=2, ensure_ascii=False) if as_json else plan_text(plan)
        )
