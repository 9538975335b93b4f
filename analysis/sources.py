"""Where an analysis gets its site document: the stored record (through the inventory
selector) or a site file that has not been stored yet (validated the same way as an import),
and the command line's words for names that are not there.

Exit statuses of the analysis commands (README, "Command line"): 0 for a safe verdict or a
possible plan; ``EXIT_INPUT`` (2) for a usage or input error (an unknown site, procedure, device
or CT, a site file with errors; the same status argparse gives a bad option); ``EXIT_UNSAFE``
(3) for an unsafe verdict or an impossible plan.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

from django.core.management.base import CommandError

from inventory.models import Site
from inventory.selectors import site_document
from siterules.procedure_refs import nearest

EXIT_INPUT = 2
EXIT_UNSAFE = 3

# The sections of a site document that hold the things a command may be asked about.
SECTIONS = {"ct": "cts", "device": "devices", "procedure": "procedures"}
NOUNS = {"ct": "CT", "device": "device", "procedure": "procedure", "site": "site"}


class InputError(CommandError):
    """A usage or input error: exit status ``EXIT_INPUT`` (2)."""

    def __init__(self, message: str) -> None:
        super().__init__(message, returncode=EXIT_INPUT)


def did_you_mean(value: str, codes: Iterable[str]) -> str:
    """`` (did you mean 'A' or 'B'?)`` with the nearest existing codes (difflib's ratio), or
    a hint at what exists when nothing is near."""
    codes = sorted(set(codes))
    near = nearest(value, codes)
    if not near:
        # a prefix or a shared stem still helps where the ratio does not (e.g. 'R-13' for R-133)
        near = [c for c in codes if value.lower() in c.lower()][:3]
    if near:
        return f" (did you mean {' or '.join(repr(c) for c in near)}?)"
    if not codes:
        return " (there are none)"
    shown = ", ".join(codes[:5]) + (", ..." if len(codes) > 5 else "")
    return f" (there are {len(codes)}: {shown})"


def unknown(what: str, value: str, codes: Iterable[str], where: str = "") -> InputError:
    """The error for a name that is not there, with the nearest ones that are."""
    at = f" at {where}" if where else ""
    return InputError(f"no {NOUNS.get(what, what)} {value!r}{at}{did_you_mean(value, codes)}")


def codes_of(doc: dict, what: str) -> list[str]:
    """The codes of one kind of thing (``ct``, ``device``, ``procedure``) in a document."""
    return [
        str(item["code"])
        for item in doc.get(SECTIONS[what]) or []
        if isinstance(item, dict) and isinstance(item.get("code"), str)
    ]


def require(doc: dict, what: str, code: str) -> None:
    """Raise ``InputError`` (with "did you mean") unless the document has ``code``."""
    codes = codes_of(doc, what)
    if code not in codes:
        raise unknown(what, code, codes, str(doc.get("site", {}).get("code") or ""))


@dataclass
class Source:
    """A site document and, for a site file, the procedures left out of it because they have
    errors (procedure code -> every error, pointer first)."""

    doc: dict
    name: str
    unchecked: dict[str, list[str]] = field(default_factory=dict)


def load_source(*, site: str | None = None, file: str | None = None) -> Source:
    """The site document of a stored site (by code) or of a site file, for the CLI.

    A site file's errors outside its procedures refuse the whole file (``InputError`` with
    every error): the circuit itself is in doubt. A procedure with errors is left out of the
    document and its errors kept in ``unchecked``, so the other procedures, the plans and the
    reports still run.
    """
    if file:
        return _load_file(file)
    try:
        return Source(doc=site_document(Site.objects.get(code=site)), name=str(site))
    except Site.DoesNotExist as exc:
        codes = Site.objects.values_list("code", flat=True)
        raise unknown("site", str(site), codes) from exc


def _load_file(file: str) -> Source:
    from inventory.sitefile.files import capped, read_site_file
    from inventory.sitefile.validate import SiteFileParseError, validate_site_document

    try:
        doc = read_site_file(file)
    except SiteFileParseError as exc:
        lines = str(exc).splitlines()
        raise InputError("\n".join([lines[0], *capped(lines[1:])])) from exc
    errors = validate_site_document(doc)
    procedures = doc.get("procedures") if isinstance(doc, dict) else None
    procedures = procedures if isinstance(procedures, list) else []
    by_procedure: dict[int, list[str]] = {}
    others = []
    for error in errors:
        tokens = error.pointer.split("/")
        if (
            len(tokens) > 2
            and tokens[1] == "procedures"
            and tokens[2].isdigit()
            and int(tokens[2]) < len(procedures)
        ):
            by_procedure.setdefault(int(tokens[2]), []).append(str(error))
            continue
        others.append(str(error))
    if others:
        shown = capped([str(e) for e in errors])
        raise InputError(f"{file}: {len(errors)} error(s)\n" + "\n".join(shown))
    unchecked: dict[str, list[str]] = {}
    for index, lines in by_procedure.items():
        item = procedures[index]
        code = item.get("code") if isinstance(item, dict) else None
        unchecked.setdefault(str(code) if code else f"/procedures/{index}", []).extend(lines)
    if by_procedure:
        doc = {**doc, "procedures": [p for k, p in enumerate(procedures) if k not in by_procedure]}
    return Source(doc=doc, name=file, unchecked=unchecked)


def load_document(*, site: str | None = None, file: str | None = None) -> dict:
    """``load_source(...).doc``: the document alone (procedures with errors left out)."""
    return load_source(site=site, file=file).doc


def split_targets(
    targets: list[str], *, file: str | None, what: str, many: bool = False
) -> tuple[str | None, list[str]]:
    """``SITE THING`` or, with ``--file``, just ``THING``; with ``many``, any number of things
    (none: every one)."""
    word = what.upper()
    if file:
        if many or len(targets) == 1:
            return None, targets
        raise InputError(f"with --file give only the {what}")
    if not targets:
        raise InputError(f"give SITE and {word} (or --file FILE and {word})")
    if many or len(targets) == 2:
        return targets[0], targets[1:]
    raise InputError(f"give SITE and {word} (or --file FILE and {word})")
