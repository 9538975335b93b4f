"""``manage.py ct_report SITE CT [--json]`` (or ``--file FILE CT``): a CT at its tap in use —
ratio, class at the tap, burdens from the nodal solve, saturation at the site's fault level,
knee points and every finding that names it."""

from __future__ import annotations

from analysis.compute import ct_report
from analysis.management.base import SiteBodyCommand
from analysis.textout import report_text


class Command(SiteBodyCommand):
    help = (
        "Report a CT's ratings at its tap in use. Exit status: 0, or 2 for a usage or input "
        "error (an unknown site or CT, a site file with errors)."
    )
    thing = "ct"

    def body(self, doc: dict, name: str) -> dict:
        return ct_report(doc, name)

    text = staticmethod(report_text)
