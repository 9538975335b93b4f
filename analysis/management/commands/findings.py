"""``findings [--site SITE] [--severity S] [--json]``: the stored findings, each saying whether
the record changed after it was computed (``stale``). ``--severity S`` keeps S and every worse
severity (danger > warning > caution > notice): ``--severity warning`` lists the dangers too."""

from __future__ import annotations

import json

from django.core.management.base import BaseCommand

from analysis.engine.findings import SEVERITY_ORDER
from analysis.selectors import findings_list
from analysis.sources import unknown
from analysis.textout import terminal_safe
from inventory.models import Site


class Command(BaseCommand):
    help = (
        "List the findings of the last recompute (design.md's findings JSON with --json), most "
        "severe first. Exit status: 0, or 2 for a usage or input error (an unknown site)."
    )

    def add_arguments(self, parser) -> None:
        parser.add_argument("--site", help="site code")
        parser.add_argument(
            "--severity",
            choices=SEVERITY_ORDER,
            help="this severity or worse (danger > warning > caution > notice)",
        )
        parser.add_argument("--json", action="store_true", help="print the API's JSON body")

    def handle(self, *args, site: str | None, severity: str | None, json: bool, **options):
        if site and not Site.objects.filter(code=site).exists():
            raise unknown("site", site, Site.objects.values_list("code", flat=True))
        rows = findings_list(site=site, severity=severity, or_worse=True)
        if json:
            self.stdout.write(terminal_safe(_dumps(rows)))
            return
        for row in rows:
            where = " ".join(
                f"{k}={row[k]}"
                for k in ("ct", "device", "input", "circuit", "procedure", "step")
                if row[k] is not None
            )
            stale = " [STALE: the record changed since]" if row["stale"] else ""
            self.stdout.write(
                terminal_safe(
                    f"{row['site']} {row['severity']:<8} {row['code']:<22} {where}{stale}\n"
                    f"    {row['message']}"
                )
            )
        self.stdout.write(f"{len(rows)} finding(s)")


def _dumps(rows: list[dict]) -> str:
    return json.dumps(rows, indent=2, ensure_ascii=False)
