"""``manage.py ct_report SITE CT [--json]`` (or ``--file FILE CT``): a CT at its tap in use —
ratio, class at the tap, burdens from the nodal solve, saturation at the site's fault level,
knee points and every finding that names it."""

from __future__ import annotations

import json

from django.core.management.base import BaseCommand, CommandError

from analysis.compute import ct_report
from analysis.sources import load_document, split_targets
from analysis.textout import report_text


class Command(BaseCommand):
    help = "Report a CT's ratings at its tap in use."

    def add_arguments(self, parser) -> None:
        parser.add_argument("targets", nargs="+", metavar="SITE CT")
        parser.add_argument("--file", help="report from a site file instead of a stored site")
        parser.add_argument(
            "--json", action="store_true", dest="as_json", help="print the API's JSON body"
        )

    def handle(self, *args, targets: list[str], file: str | None, as_json: bool, **options):
        site, ct = split_targets(targets, file=file, what="ct")
        doc = load_document(site=site, file=file)
        try:
            report = ct_report(doc, ct)
        except KeyError as exc:
            raise CommandError(str(exc).strip('"')) from exc
        self.stdout.write(
            json.dumps(report, indent=2, ensure_ascii=False) if as_json else report_text(report)
        )
