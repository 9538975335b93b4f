"""The shape shared by the analysis commands that answer a JSON body for one thing of one site:
``SITE THING`` or ``--file FILE THING``, with ``--json`` printing exactly the API's body and a
readable text otherwise."""

from __future__ import annotations

import json
from typing import Any

from django.core.management.base import BaseCommand, CommandError

from analysis.engine import ProcedureError
from analysis.sources import load_document, split_targets


class SiteBodyCommand(BaseCommand):
    """Subclasses name the thing (``thing``), compute the body and render it as text."""

    thing = "thing"

    def add_arguments(self, parser) -> None:
        parser.add_argument("targets", nargs="+", metavar=f"SITE {self.thing.upper()}")
        parser.add_argument("--file", help="use a site file instead of a stored site")
        parser.add_argument(
            "--json", action="store_true", dest="as_json", help="print the API's JSON body"
        )

    def body(self, doc: dict, name: str) -> dict[str, Any]:
        raise NotImplementedError

    def text(self, body: dict[str, Any]) -> str:
        raise NotImplementedError

    def handle(self, *args, targets: list[str], file: str | None, as_json: bool, **options):
        site, name = split_targets(targets, file=file, what=self.thing)
        doc = load_document(site=site, file=file)
        try:
            body = self.body(doc, name)
        except (KeyError, ProcedureError) as exc:
            raise CommandError(str(exc).strip('"')) from exc
        self.stdout.write(
            json.dumps(body, indent=2, ensure_ascii=False) if as_json else self.text(body)
        )
