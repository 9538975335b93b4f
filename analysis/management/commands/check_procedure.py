"""``manage.py check_procedure SITE [PROCEDURE ...] [--json]`` (or ``--file FILE [PROCEDURE
...]``): simulate stored procedures step by step, every transition included, and print the
verdicts. No PROCEDURE means every procedure of the site; each one that can be checked is, and
the others' errors follow on stderr."""

from __future__ import annotations

from typing import Any

from analysis import actions
from analysis.management.base import EXIT_STATUS_HELP, SiteBodyCommand
from analysis.textout import verdict_text


class Command(SiteBodyCommand):
    help = (
        "Check isolation procedures for open CT secondaries and unisolated trips (every "
        "procedure of the site when none is named; --json prints the verdict object for one "
        "named procedure, a list otherwise). "
        + EXIT_STATUS_HELP.format(
            ok="when every procedure checked is safe",
            bad="when one is unsafe (a danger finding in some step)",
            thing="procedure, a procedure that names what the record does not have",
        )
    )
    thing = "procedure"
    many = True

    def body(self, doc: dict, name: str) -> dict:
        return actions.procedure_check(doc, name)

    def unsafe(self, body: dict[str, Any]) -> str | None:
        if body["safe"]:
            return None
        d = body["first_danger"] or {}
        where = " ".join(str(d[k]) for k in ("ct", "device", "input") if d.get(k))
        return (
            f"procedure {body['procedure']} is UNSAFE: step {d.get('step')} ({d.get('stage')}) "
            f"{d.get('code')}" + (f" on {where}" if where else "")
        )

    text = staticmethod(verdict_text)
