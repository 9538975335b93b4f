"""The shape shared by the analysis commands that answer a JSON body for one thing of one site:
``SITE THING`` or ``--file FILE THING``, with ``--json`` printing exactly the API's body and a
readable text otherwise.

Exit statuses (``analysis.sources``): 0 when every answer is fine, 2 (``EXIT_INPUT``) for a
usage or input error, 3 (``EXIT_UNSAFE``) for an unsafe verdict or an impossible plan. The body
is printed in full before the command exits with 3, so a script gets both."""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

from django.core.management.base import BaseCommand, CommandError

from analysis.engine import ProcedureError
from analysis.sources import (
    EXIT_UNSAFE,
    InputError,
    Source,
    codes_of,
    load_source,
    require,
    split_targets,
)
from analysis.textout import terminal_safe

EXIT_STATUS_HELP = (
    "Exit status: 0 {ok}; 3 {bad}; 2 for a usage or input error (an unknown site or {thing}, a "
    "site file with errors)."
)


class SiteBodyCommand(BaseCommand):
    """Subclasses name the thing (``thing``), compute the body, render it as text and say
    whether it is a bad answer (``unsafe``: exit status 3).

    With ``many``, any number of things may be named, and none means every one; each is
    answered that can be, and the others' errors are reported after them (on stderr)."""

    thing = "thing"
    many = False

    def add_arguments(self, parser) -> None:
        word = self.thing.upper()
        more = f" [{word} ...]" if self.many else f" {word}"
        parser.usage = f"%(prog)s SITE{more} [--json]\n       %(prog)s --file FILE{more} [--json]"
        parser.add_argument("targets", nargs="*", metavar="SITE " + word)
        parser.add_argument("--file", help="use a site file instead of a stored site")
        parser.add_argument(
            "--json", action="store_true", dest="as_json", help="print the API's JSON body"
        )

    def body(self, doc: dict, name: str) -> dict[str, Any]:
        raise NotImplementedError

    # The readable text of a body (subclasses assign a renderer function).
    text: Callable[[dict[str, Any]], str]

    def unsafe(self, body: dict[str, Any]) -> str | None:
        """Why the answer is a bad one (exit status 3), or None."""
        return None

    def handle(self, *args, targets: list[str], file: str | None, as_json: bool, **options):
        site, names = split_targets(targets, file=file, what=self.thing, many=self.many)
        source = load_source(site=site, file=file)
        if source.unchecked and self.thing != "procedure":
            self.stderr.write(
                f"note: {source.name}: procedure(s) {', '.join(source.unchecked)} left out "
                "(they have errors; check_procedure --file lists them)"
            )
        if not self.many:
            body = self._answer(source, names[0])
            self._print([body], as_json, single=True)
            self._exit([body], [])
            return
        single = len(names) == 1
        if not names:
            names = [*codes_of(source.doc, self.thing), *source.unchecked]
        bodies: list[dict[str, Any]] = []
        errors: list[str] = []
        for name in names:
            try:
                bodies.append(self._answer(source, name))
            except CommandError as exc:
                if single:
                    raise
                errors.append(str(exc))
        self._print(bodies, as_json, single=single)
        for error in errors:
            self.stderr.write(error)
        self._exit(bodies, errors)

    def _answer(self, source: Source, name: str) -> dict[str, Any]:
        if self.thing == "procedure" and name in source.unchecked:
            raise InputError(
                f"{self.thing} {name} could not be checked:\n  "
                + "\n  ".join(source.unchecked[name])
            )
        require(source.doc, self.thing, name)
        try:
            return self.body(source.doc, name)
        except (KeyError, ProcedureError) as exc:
            raise InputError(
                f"{self.thing} {name} could not be checked:\n  "
                + str(exc).strip('"').replace("\n", "\n  ")
            ) from exc

    def _print(self, bodies: list[dict[str, Any]], as_json: bool, *, single: bool) -> None:
        if as_json:
            text = json.dumps(bodies[0] if single else bodies, indent=2, ensure_ascii=False)
        else:
            text = "\n\n".join(self.text(body) for body in bodies)
        self.stdout.write(terminal_safe(text))

    def _exit(self, bodies: list[dict[str, Any]], errors: list[str]) -> None:
        reasons = [r for r in map(self.unsafe, bodies) if r]
        if reasons:
            raise CommandError("; ".join(reasons), returncode=EXIT_UNSAFE)
        if errors:
            raise InputError(
                f"{len(errors)} {self.thing}(s) could not be checked (listed above); "
                f"{len(bodies)} checked"
            )
