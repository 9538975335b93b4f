"""Spreadsheets in and out: CT registers and tap-change logs (XLSX, CSV).

``reader`` turns a file into cells (and refuses what it cannot read faithfully), ``columns``
maps a file's headers onto the canonical columns, ``importer`` applies the rows to the sites'
files and sends them through the site file's validation and upsert, ``writer`` writes the same
columns back out.
"""

from inventory.sheets.columns import KINDS, HeaderError, load_mapping, map_headers, normal
from inventory.sheets.importer import (
    ImportCancelled,
    RowError,
    SheetImportError,
    SheetImportResult,
    import_table,
)
from inventory.sheets.reader import MAX_BYTES, SheetFileError, Table, read_path, read_table


def guess_kind(headers: list[str], mapping: dict[str, str | None] | None = None) -> str:
    """``tap_changes`` when the headers name a change (from/to/changed at), else ``cts``."""
    try:
        map_headers(headers, "tap_changes", mapping)
    except HeaderError:
        return "cts"
    return "tap_changes"


__all__ = [
    "KINDS",
    "MAX_BYTES",
    "HeaderError",
    "ImportCancelled",
    "RowError",
    "SheetFileError",
    "SheetImportError",
    "SheetImportResult",
    "Table",
    "guess_kind",
    "import_table",
    "load_mapping",
    "map_headers",
    "normal",
    "read_path",
    "read_table",
]
