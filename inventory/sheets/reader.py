"""Read a spreadsheet (XLSX with pandas' calamine engine, or CSV) into a table of cells.

The first row holds the headers (row 1, as a spreadsheet shows it); every later row is data,
numbered as the spreadsheet numbers it. Blank cells are ``None`` (pandas gives NaN: it never
goes further). What the import cannot read faithfully is refused with a clear message before
anything is parsed: a file over the size limit, one that is not XLSX or CSV, an empty file or
sheet, formulas (the value a formula shows depends on the program that last saved it) and
merged cells (one value spread over several rows or columns).
"""

from __future__ import annotations

import io
import math
import re
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
from defusedxml import ElementTree

MAX_BYTES = 10 * 1024 * 1024
_NS_MAIN = "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}"
_NS_REL = "{http://schemas.openxmlformats.org/officeDocument/2006/relationships}"
_NS_PKG_REL = "{http://schemas.openxmlformats.org/package/2006/relationships}"
_FORMULA_CELL = re.compile(rb"<(?:\w+:)?c\b[^>]*?\br=\"([A-Z]+[0-9]+)\"[^>]*>\s*<(?:\w+:)?f\b")
_MERGE = re.compile(rb"<(?:\w+:)?mergeCell\b[^>]*?\bref=\"([A-Z0-9:]+)\"")


class SheetFileError(ValueError):
    """The file as a whole cannot be imported (the message says why and what to do)."""


@dataclass
class Table:
    """The cells of one sheet: headers as written (row 1), then the data rows with the row
    number a spreadsheet shows for each."""

    name: str
    sheet: str
    headers: list[str]
    rows: list[list[Any]]
    numbers: list[int]


def _blank(value: Any) -> Any:
    if value is None:
        return None
    if isinstance(value, float) and math.isnan(value):
        return None
    if value is pd.NaT:
        return None
    if isinstance(value, str):
        value = value.strip()
        return value or None
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    return value


def read_table(data: bytes, *, name: str, sheet: str | None = None) -> Table:
    """The table in ``data`` (the bytes of an XLSX or CSV file called ``name``)."""
    if len(data) > MAX_BYTES:
        raise SheetFileError(
            f"{name}: the file is {len(data) / 1024 / 1024:.1f} MB; the limit is "
            f"{MAX_BYTES // 1024 // 1024} MB (split it, by site for example)"
        )
    if not data.strip():
        raise SheetFileError(f"{name}: the file is empty")
    if data[:4] == b"PK\x03\x04":
        return _read_xlsx(data, name, sheet)
    if data[:8] == b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1":
        raise SheetFileError(
            f"{name}: an old-style .xls workbook; save it as .xlsx (or CSV) and import that"
        )
    if sheet:
        raise SheetFileError(f"{name}: a CSV file has no sheets (--sheet {sheet!r})")
    return _read_csv(data, name)


def read_path(path: str | Path, *, sheet: str | None = None) -> Table:
    path = Path(path)
    size = path.stat().st_size
    if size > MAX_BYTES:
        raise SheetFileError(
            f"{path.name}: the file is {size / 1024 / 1024:.1f} MB; the limit is "
            f"{MAX_BYTES // 1024 // 1024} MB (split it, by site for example)"
        )
    return read_table(path.read_bytes(), name=path.name, sheet=sheet)


def _text(data: bytes, name: str) -> str:
    if b"\x00" in data[:4096]:
        raise SheetFileError(f"{name}: not a spreadsheet this import reads (XLSX or CSV)")
    for encoding in ("utf-8-sig", "cp1252"):
        try:
            return data.decode(encoding)
        except UnicodeDecodeError:
            continue
    raise SheetFileError(f"{name}: not a spreadsheet this import reads (XLSX or CSV)")


def _read_csv(data: bytes, name: str) -> Table:
    text = _text(data, name)
    try:
        frame = pd.read_csv(
            io.StringIO(text),
            header=None,
            dtype=str,
            keep_default_na=False,
            skip_blank_lines=False,
            sep=None if "\t" in text.partition("\n")[0] else ",",
            engine="python" if "\t" in text.partition("\n")[0] else "c",
        )
    except (pd.errors.ParserError, ValueError) as exc:
        raise SheetFileError(f"{name}: not a CSV file this import can read: {exc}") from None
    return _table(frame, name, "")


def _sheet_part(archive: zipfile.ZipFile, sheet: str | None, name: str) -> tuple[str, str]:
    """(sheet name, path of its XML part) of the chosen (or first) sheet."""
    try:
        workbook = ElementTree.fromstring(archive.read("xl/workbook.xml"))
        rels = ElementTree.fromstring(archive.read("xl/_rels/workbook.xml.rels"))
    except KeyError:
        raise SheetFileError(f"{name}: not a spreadsheet this import reads (XLSX or CSV)") from None
    sheets = [
        (s.get("name", ""), s.get(f"{_NS_REL}id", "")) for s in workbook.iter(f"{_NS_MAIN}sheet")
    ]
    if not sheets:
        raise SheetFileError(f"{name}: the workbook has no sheets")
    chosen: tuple[Any, Any] | None = sheets[0]
    if sheet is not None:
        chosen = next((s for s in sheets if s[0] == sheet), None)
        if chosen is None:
            raise SheetFileError(
                f"{name}: no sheet {sheet!r} (sheets: {', '.join(repr(s[0]) for s in sheets)})"
            )
    assert chosen is not None
    targets = {r.get("Id"): r.get("Target", "") for r in rels.iter(f"{_NS_PKG_REL}Relationship")}
    target = targets.get(chosen[1], "")
    part = target.lstrip("/") if target.startswith("/") else f"xl/{target}"
    return chosen[0], part


def _read_xlsx(data: bytes, name: str, sheet: str | None) -> Table:
    try:
        archive = zipfile.ZipFile(io.BytesIO(data))
    except zipfile.BadZipFile:
        raise SheetFileError(f"{name}: not a spreadsheet this import reads (XLSX or CSV)") from None
    with archive:
        sheet_name, part = _sheet_part(archive, sheet, name)
        try:
            xml = archive.read(part)
        except KeyError:
            raise SheetFileError(f"{name}: sheet {sheet_name!r} is missing from the file") from None
    formulas = [m.decode() for m in _FORMULA_CELL.findall(xml)] if b"<f" in xml else []
    if formulas:
        shown = ", ".join(formulas[:10]) + (
            f" and {len(formulas) - 10} more" if len(formulas) > 10 else ""
        )
        raise SheetFileError(
            f"{name}, sheet {sheet_name!r}: cells {shown} hold formulas; the import takes "
            "values only (copy the sheet and paste values, then import that)"
        )
    merged = [m.decode() for m in _MERGE.findall(xml)]
    if merged:
        raise SheetFileError(
            f"{name}, sheet {sheet_name!r}: merged cells {', '.join(merged[:10])}; unmerge them "
            "so that every row holds its own values"
        )
    try:
        frame = pd.read_excel(
            io.BytesIO(data), sheet_name=sheet_name, header=None, dtype=object, engine="calamine"
        )
    except Exception as exc:  # the engine's own errors vary by file; all mean "cannot read"
        raise SheetFileError(f"{name}: the workbook cannot be read: {exc}") from None
    return _table(frame, name, sheet_name)


def _table(frame: pd.DataFrame, name: str, sheet: str) -> Table:
    cells = [[_blank(v) for v in row] for row in frame.itertuples(index=False, name=None)]
    where = f"{name}" + (f", sheet {sheet!r}" if sheet else "")
    if not cells or not any(v is not None for row in cells for v in row):
        raise SheetFileError(f"{where}: the sheet is empty")
    header = cells[0]
    if all(v is None for v in header):
        raise SheetFileError(
            f"{where}: row 1 is blank; the first row must name the columns (site, ct, ...)"
        )
    if any(v is not None and not isinstance(v, str) for v in header):
        raise SheetFileError(
            f"{where}: row 1 holds values, not column names ("
            + ", ".join(repr(v) for v in header if v is not None and not isinstance(v, str))
            + "); the first row must name the columns (site, ct, ...)"
        )
    headers = [v or "" for v in header]
    rows, numbers = [], []
    for offset, row in enumerate(cells[1:], start=2):
        if any(v is not None for v in row):
            rows.append(row)
            numbers.append(offset)
    if not rows:
        raise SheetFileError(f"{where}: no data rows below the headers")
    return Table(name=name, sheet=sheet, headers=headers, rows=rows, numbers=numbers)
