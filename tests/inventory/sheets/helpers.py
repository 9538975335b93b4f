"""Shared set-up of the spreadsheet tests: the demo sites loaded, files written in memory."""

from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Any

from openpyxl import Workbook

from inventory.services import site_import
from inventory.sitefile.validate import load_site_file

DEMO = Path(__file__).resolve().parents[3] / "fixtures" / "demo"


def load_demo() -> None:
    for path in sorted(DEMO.glob("*.json")):
        site_import(doc=load_site_file(path))


def csv_bytes(rows: list[list[Any]]) -> bytes:
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(rows)
    return out.getvalue().encode()


def xlsx_bytes(rows: list[list[Any]], *, build=None) -> bytes:
    book = Workbook()
    ws = book.active
    for row in rows:
        ws.append(row)
    if build is not None:
        build(ws)
    out = io.BytesIO()
    book.save(out)
    return out.getvalue()


def read_csv(data: bytes) -> list[list[str]]:
    return list(csv.reader(io.StringIO(data.decode())))
