"""The API reads JSON only (anything else is a 415 in the one error shape), and no more of it
than ``DATA_UPLOAD_MAX_MEMORY_SIZE`` bytes: a larger body is a 413, refused from its
``Content-Length`` before it is read, or as soon as a body without one passes the limit."""

from __future__ import annotations

import io
from typing import Any

from django.conf import settings
from rest_framework.parsers import JSONParser

from api.errors import FieldErrors, RequestTooLarge
from inventory.sitefile.files import read_site_bytes
from inventory.sitefile.validate import SiteFileParseError


def body_limit() -> int | None:
    """The largest body the API reads, in bytes (None: no limit)."""
    return settings.DATA_UPLOAD_MAX_MEMORY_SIZE


class LimitedJSONParser(JSONParser):
    """DRF's JSON parser behind the size limit (DRF reads the raw stream, which Django's own
    ``DATA_UPLOAD_MAX_MEMORY_SIZE`` check does not cover)."""

    def parse(self, stream: Any, media_type: str | None = None, parser_context: Any = None) -> Any:
        limit = body_limit()
        if limit is not None:
            request = (parser_context or {}).get("request")
            meta = getattr(request, "META", {})
            try:
                declared = int(meta.get("CONTENT_LENGTH") or 0)
            except ValueError:
                declared = 0
            if declared > limit:
                raise RequestTooLarge(
                    f"the body is {declared} bytes; this API reads {limit} at most"
                )
            data = stream.read(limit + 1)
            if len(data) > limit:
                raise RequestTooLarge(f"the body is over {limit} bytes; this API reads no more")
            stream = io.BytesIO(data)
        return super().parse(stream, media_type, parser_context)


class SiteFileJSONParser(JSONParser):
    """A site file as JSON, read by the one site-file loader (``inventory.sitefile.files``), so
    the API refuses what ``import_site`` refuses (a body above ``SITE_FILE_MAX_BYTES`` as a
    413, a key given twice, a YAML alias, nesting too deep), in the same words, as a 400 naming
    the JSON pointer where there is one."""

    name = "request.json"

    def parse(self, stream: Any, media_type: str | None = None, parser_context: Any = None) -> Any:
        limit = settings.SITE_FILE_MAX_BYTES
        data = stream.read(limit + 1) if stream is not None else b""
        if len(data) > limit:
            raise RequestTooLarge(f"the site file is over {limit} bytes (SITE_FILE_MAX_BYTES)")
        try:
            return read_site_bytes(data, name=self.name)
        except SiteFileParseError as exc:
            pairs = [(e.pointer, e.message) for e in exc.errors] or [("", str(exc))]
            raise FieldErrors(
                "the site file cannot be read; nothing was written", pairs, key="pointer"
            ) from exc


class SiteFileYAMLParser(SiteFileJSONParser):
    """A site file as YAML (``application/yaml``)."""

    media_type = "application/yaml"
    name = "request.yaml"
