"""Write tables as XLSX (openpyxl, with defusedxml installed for its XML) or CSV, and the rows of
the record's own sheets: the CT register and the tap-change log, in the columns the importer
reads, so that export → import changes nothing."""

from __future__ import annotations

import csv
import datetime as dt
import io
from collections.abc import Callable, Iterable, Sequence
from typing import Any

from openpyxl import Workbook

from inventory import models
from inventory.sheets.columns import CT_COLUMNS, TAP_CHANGE_COLUMNS
from record.document import iso_utc, num
from trade.taps import format_tap, format_terminals

CONTENT_TYPES = {
    "xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
    "csv": "text/csv; charset=utf-8",
}

CT_HEADERS = [c.name for c in CT_COLUMNS]
TAP_CHANGE_HEADERS = [c.name for c in TAP_CHANGE_COLUMNS]


def _csv_cell(value: Any) -> Any:
    if value is None:
        return ""
    if isinstance(value, dt.datetime):
        return iso_utc(value)
    return value


def _xlsx_cell(value: Any) -> Any:
    if isinstance(value, dt.datetime):  # spreadsheet date-times have no zone: UTC
        return value.astimezone(dt.UTC).replace(tzinfo=None)
    if isinstance(value, list | dict):
        return str(value)
    return value


def write_table(
    headers: Sequence[str],
    rows: Iterable[Sequence[Any]],
    *,
    fmt: str,
    sheet: str = "Sheet1",
    progress: Callable[[int], None] | None = None,
) -> bytes:
    """The file (``fmt`` ``xlsx`` or ``csv``) holding ``headers`` then ``rows``; blank for None."""
    if fmt == "csv":
        out = io.StringIO()
        writer = csv.writer(out, lineterminator="\r\n")
        writer.writerow(headers)
        for n, row in enumerate(rows, start=1):
            writer.writerow([_csv_cell(v) for v in row])
            if progress is not None and n % 5000 == 0:
                progress(n)
        return out.getvalue().encode("utf-8")
    if fmt != "xlsx":
        raise ValueError(f"format must be xlsx or csv, got {fmt!r}")
    book = Workbook(write_only=True)
    ws = book.create_sheet(sheet)
    ws.append(list(headers))
    for n, row in enumerate(rows, start=1):
        ws.append([_xlsx_cell(v) for v in row])
        if progress is not None and n % 5000 == 0:
            progress(n)
    out_b = io.BytesIO()
    book.save(out_b)
    return out_b.getvalue()


def _site_ids(site: str | None) -> list[int]:
    sites = models.Site.objects.order_by("code")
    if site is not None:
        sites = sites.filter(code=site)
    return list(sites.values_list("id", flat=True))


def ct_register_rows(*, site: str | None = None) -> Iterable[list[Any]]:
    """The CT register: one row per CT, in the importer's columns (sites and CTs by code)."""
    from inventory.selectors import site_records

    ids = _site_ids(site)
    for start in range(0, len(ids), 50):
        records = site_records(ids[start : start + 50])
        for record in sorted(records.values(), key=lambda r: r.site.code):
            for ct in record.cts:
                yield [
                    record.site.code,
                    ct.equipment,
                    ct.code,
                    ct.phase,
                    ct.set_name,
                    num(ct.secondary_a),
                    format_terminals(list(ct.terminals)),
                    format_tap(ct.in_use),
                    ct.accuracy,
                    num(ct.rated_burden_va),
                    num(ct.winding_ohm),
                    num(ct.rating_factor),
                    ct.nameplate or None,
                ]


def split_reason(reason: str) -> tuple[str | None, str | None]:
    """(work order, reason) of a stored reason that starts with a work-order number such as
    ``WO-16-2207 feeder rebuilt`` (what the importer joins with a space)."""
    first, sep, rest = reason.partition(" ")
    looks_like_wo = "-" in first and any(ch.isdigit() for ch in first) and first[:1].isalpha()
    if looks_like_wo:
        return first, (rest if sep else None) or None
    return None, reason or None


def tap_change_rows(*, site: str | None = None) -> Iterable[list[Any]]:
    """The tap-change log: one row per recorded change, oldest first per CT."""
    changes = models.TapChange.objects.filter(ct__site_id__in=_site_ids(site)).order_by(
        "ct__site__code", "ct__code", "changed_at", "id"
    )
    for site_code, ct, from_tap, to_tap, at, by, reason in changes.values_list(
        "ct__site__code", "ct__code", "from_tap", "to_tap", "changed_at", "changed_by", "reason"
    ).iterator(chunk_size=5000):
        work_order, rest = split_reason(reason)
        yield [
            site_code,
            ct,
            format_tap(from_tap),
            format_tap(to_tap),
            at,
            work_order,
            by or None,
            rest,
        ]
