"""Site files as the commands and the API read them: through the one loader
(``validate.loading``) with the limits of the settings, and errors listed up to a cap."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from django.conf import settings

from inventory.sitefile.validate import SiteFileParseError, load_site_bytes, load_site_file


def read_site_file(path: str | Path) -> dict:
    """The document of the site file at ``path``, or :class:`SiteFileParseError` saying why
    not (a missing or unreadable file too), never more than ``SITE_FILE_MAX_BYTES`` read."""
    try:
        return load_site_file(path, max_bytes=settings.SITE_FILE_MAX_BYTES)
    except OSError as exc:
        raise SiteFileParseError(f"{path}: {exc.strerror or exc}") from exc


def read_site_bytes(data: bytes, *, name: str = "<request>") -> dict:
    """The document of a site file's bytes (an upload, a request body)."""
    return load_site_bytes(data, name=name, max_bytes=settings.SITE_FILE_MAX_BYTES)


def capped(lines: Sequence[str], limit: int | None = None) -> list[str]:
    """The first ``SITE_FILE_MAX_ERRORS_SHOWN`` lines and, if there are more, a line counting
    the rest: a file of a million bad rows must not print a million lines."""
    limit = settings.SITE_FILE_MAX_ERRORS_SHOWN if limit is None else limit
    if len(lines) <= limit:
        return list(lines)
    return [*lines[:limit], f"... and {len(lines) - limit} more error(s) not shown"]
