"""``manage.py check_procedure SITE PROCEDURE [--json]`` (or ``--file FILE PROCEDURE``): simulate
a stored procedure step by step, every transition included, and print the verdict."""

from __future__ import annotations

import json

from django.core.management.base import BaseCommand, CommandError

from analysis import engine
from analysis.sources import load_document, split_targets
from analysis.textout import verdict_text


class Command(BaseCommand):
    help = "Check an isolation procedure for open CT secondaries and unisolated trips."

    def add_arguments(self, parser) -> None:
        parser.add_argument("targets", nargs="+", metavar="SITE PROCEDURE")
        parser.add_argument("--file", help="check a site file instead of a stored site")
        parser.add_argument(
            "--json", action="store_true", dest="as_json", help="print the API's JSON body"
        )

    def handle(self, *args, targets: list[str], file: str | None, as_json: bool, **options):
        site, code = split_targets(targets, file=file, what="procedure")
        doc = load_document(site=site, file=file)
        netlist = engine.build_netlist(doc)
        try:
            verdict = engine.check_procedure(netlist, code).to_json(doc["site"]["code"])
        except (KeyError, engine.ProcedureError) as exc:
            raise CommandError(str(exc).strip('"')) from exc
        self.stdout.write(
            json.dumps(verdict, indent=2, ensure_ascii=False) if as_json else verdict_text(verdict)
        )
