"""The site file ``loopkeep.site/1``: its JSON Schema and the checks an import runs first."""

from inventory.sitefile.validate import (
    FORMAT,
    SCHEMA_PATH,
    SiteFileError,
    SiteFileParseError,
    load_schema,
    load_site_file,
    load_site_text,
    validate_site_document,
)

__all__ = [
    "FORMAT",
    "SCHEMA_PATH",
    "SiteFileError",
    "SiteFileParseError",
    "load_schema",
    "load_site_file",
    "load_site_text",
    "validate_site_document",
]
