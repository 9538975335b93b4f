"""Where an analysis gets its site document: the stored record (through the inventory
selector) or a site file that has not been stored yet (validated the same way as an import)."""

from __future__ import annotations

from django.core.management.base import CommandError

from inventory.models import Site
from inventory.selectors import site_document


def load_document(*, site: str | None = None, file: str | None = None) -> dict:
    """The site document of a stored site (by code) or of a site file, for the CLI.

    Raises ``CommandError`` with every validation error for a bad file, or for an unknown site.
    """
    if file:
        from inventory.sitefile.validate import (
            SiteFileParseError,
            load_site_file,
            validate_site_document,
        )

        try:
            doc = load_site_file(file)
        except (OSError, SiteFileParseError) as exc:
            raise CommandError(f"{file}: {exc}") from exc
        errors = validate_site_document(doc)
        if errors:
            raise CommandError(f"{file}: {len(errors)} error(s)\n" + "\n".join(map(str, errors)))
        return doc
    try:
        return site_document(Site.objects.get(code=site))
    except Site.DoesNotExist as exc:
        raise CommandError(f"no site with code {site!r}") from exc


def split_targets(targets: list[str], *, file: str | None, what: str) -> tuple[str | None, str]:
    """``SITE THING`` or, with ``--file``, just ``THING``."""
    if file:
        if len(targets) != 1:
            raise CommandError(f"with --file give only the {what}")
        return None, targets[0]
    if len(targets) != 2:
        raise CommandError(f"give SITE and {what.upper()} (or --file FILE and {what.upper()})")
    return targets[0], targets[1]
