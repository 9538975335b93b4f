"""Rows of a sheet into the record, through the site file's own validation and upsert.

A sheet is one more door into the same rules: for each site it names, the stored site file is
exported, the rows are applied to it (a CT register row creates or changes one CT; a tap-change
log row adds one event to a CT's history and, when it is the newest, moves the tap in use), the
result is checked by the site-file validator and written by the site-file importer
(``upsert_site``), all sites of the file in one transaction. Nothing is written when any row of
any site is wrong; every error names the spreadsheet row (the header is row 1), the column header
as the file writes it, the value and what is wrong.
"""

from __future__ import annotations

import datetime as dt
import gc
import re
from collections import Counter, defaultdict
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any

from django.db import transaction
from django.utils.dateparse import parse_datetime

from inventory import models
from inventory.sheets.columns import HeaderError, Mapped, map_headers
from inventory.sheets.reader import Table
from inventory.sitefile.importer import ImportResult, upsert_site
from record.document import iso_utc, num
from trade.taps import format_tap, parse_tap, parse_terminals

CHUNK_SITES = 20  # sites exported, checked and written together (memory bounded per chunk)

# CT register column -> key of the site file's CT entry.
_CT_KEYS = {
    "ct": "code",
    "equipment": "equipment",
    "phase": "phase",
    "set": "set",
    "secondary_a": "secondary_a",
    "terminals": "terminals",
    "in_use": "in_use",
    "accuracy": "accuracy",
    "rated_burden_va": "rated_burden_va",
    "winding_ohm": "winding_ohm",
    "rating_factor": "rating_factor",
    "serial": "nameplate",
}
_CT_COLUMN_OF_KEY = {v: k for k, v in _CT_KEYS.items()}
_EVENT_COLUMN_OF_KEY = {"from": "from", "to": "to", "at": "changed_at", "by": "changed_by"}


@dataclass(frozen=True)
class RowError:
    """One problem, where a spreadsheet user finds it: row (header = 1; None for the file as a
    whole), column header as written, the value and what is wrong."""

    row: int | None
    column: str
    value: Any
    message: str

    def as_dict(self) -> dict[str, Any]:
        value = self.value
        if isinstance(value, dt.datetime):
            value = value.isoformat()
        return {"row": self.row, "column": self.column, "value": value, "message": self.message}

    def __str__(self) -> str:
        where = f"row {self.row}" if self.row is not None else "file"
        column = f", column {self.column!r}" if self.column else ""
        value = "" if self.value is None else f" ({self.value!r})"
        return f"{where}{column}{value}: {self.message}"


class SheetImportError(ValueError):
    """The sheet cannot be imported; ``errors`` lists every problem (nothing was written)."""

    def __init__(self, errors: list[RowError]) -> None:
        self.errors = sorted(errors, key=lambda e: (e.row is not None, e.row or 0, e.column))
        super().__init__("\n".join(str(e) for e in self.errors))


class ImportCancelled(Exception):
    """The import was asked to stop; it rolled back."""


@dataclass
class SheetImportResult:
    """What an import did (or, on a dry run, would do): rows created / updated / unchanged,
    the tap changes recorded and the rows written per model."""

    kind: str
    dry_run: bool
    rows: int = 0
    created: int = 0
    updated: int = 0
    unchanged: int = 0
    sites: int = 0
    tap_changes: list[str] = field(default_factory=list)
    written: Counter = field(default_factory=Counter)

    def summary(self) -> str:
        verb = "would be" if self.dry_run else "were"
        noun = "CT" if self.kind == "cts" else "tap change"
        return (
            f"{self.rows} {noun} row(s) over {self.sites} site(s): {self.created} created, "
            f"{self.updated} updated, {self.unchanged} unchanged ({verb} written)"
        )

    def as_dict(self) -> dict[str, Any]:
        return {
            "kind": self.kind,
            "dry_run": self.dry_run,
            "rows": self.rows,
            "created": self.created,
            "updated": self.updated,
            "unchanged": self.unchanged,
            "sites": self.sites,
            "tap_changes": list(self.tap_changes),
            "summary": self.summary(),
        }


@dataclass
class _Row:
    number: int
    cells: dict[str, tuple[Mapped, Any]]  # canonical column -> (mapping, cell as written)
    values: dict[str, Any]  # canonical column -> parsed value (None: blank)

    def where(self, column: str, message: str) -> RowError:
        found = self.cells.get(column)
        if found is None:
            return RowError(self.number, column, None, message)
        return RowError(self.number, found[0].header, found[1], message)


# -- cells --------------------------------------------------------------------------------------


def _text(value: Any) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value).strip()


def _number(value: Any, factor: float) -> float:
    if isinstance(value, (bool, dt.datetime | dt.date)):
        raise ValueError("must be a number")
    try:
        number = float(value) if isinstance(value, int | float) else float(str(value).strip())
    except ValueError:
        raise ValueError("must be a number") from None
    if number != number or number in (float("inf"), float("-inf")):
        raise ValueError("must be a finite number")
    return num(float(f"{number * factor:.12g}"))


def _moment(value: Any) -> str:
    """A date-time cell as the site file writes it (UTC; a time without an offset is UTC)."""
    at: dt.datetime | None
    if isinstance(value, dt.datetime):
        at = value
    elif isinstance(value, dt.date):
        at = dt.datetime(value.year, value.month, value.day)
    else:
        text = _text(value)
        at = parse_datetime(text) or parse_datetime(text.replace(" ", "T", 1))
        if at is None:
            try:
                at = dt.datetime.fromisoformat(text)
            except ValueError:
                raise ValueError("must be a date and time such as 2024-03-05T10:00:00Z") from None
    if at.tzinfo is None:
        at = at.replace(tzinfo=dt.UTC)
    return iso_utc(at)


_NUMBERS = {"secondary_a", "rated_burden_va", "winding_ohm", "rating_factor"}


def _parse(column: str, value: Any, factor: float) -> Any:
    if column in _NUMBERS:
        return _number(value, factor)
    if column == "terminals":
        if isinstance(value, int | float) and not isinstance(value, bool):
            raise ValueError("a winding is X1=0;X2=100;... or a full ratio such as 600:5 MR")
        return parse_terminals(_text(value))
    if column in ("in_use", "from", "to"):
        return list(parse_tap(_text(value)))
    if column == "changed_at":
        return _moment(value)
    if column == "phase":
        return _text(value).upper()
    return _text(value)


# Columns whose cells repeat down a register (the same winding, tap or class on many CTs): each
# distinct cell is parsed once.
_REPEATING = {"terminals", "in_use", "from", "to", "accuracy", "phase", "set", "equipment"}


def _rows(table: Table, mapped: list[Mapped]) -> tuple[list[_Row], list[RowError]]:
    rows, errors = [], []
    seen: dict[tuple[str, Any], Any] = {}
    for number, cells in zip(table.numbers, table.rows, strict=True):
        row = _Row(number, {}, {})
        for m in mapped:
            name = m.column.name
            value = cells[m.index] if m.index < len(cells) else None
            row.cells[name] = (m, value)
            if value is None:
                row.values[name] = None
                continue
            key = (name, value) if name in _REPEATING and isinstance(value, str) else None
            if key is not None and key in seen:
                parsed = seen[key]
            else:
                try:
                    parsed = _parse(name, value, m.factor)
                except ValueError as exc:
                    parsed = exc
                if key is not None:
                    seen[key] = parsed
            if isinstance(parsed, ValueError):
                errors.append(RowError(number, m.header, value, str(parsed)))
                parsed = _BAD
            row.values[name] = parsed
        for m in mapped:
            if m.column.required and row.values.get(m.column.name) is None:
                errors.append(RowError(number, m.header, None, "required; the cell is blank"))
                row.values[m.column.name] = _BAD
        rows.append(row)
    return rows, errors


_BAD = object()  # a cell that did not parse (its error is reported already)


# -- applying rows to a site file ---------------------------------------------------------------


@dataclass
class _Applied:
    """A site's document after its rows, with where each part came from."""

    doc: dict
    ct_rows: dict[int, _Row] = field(default_factory=dict)  # CT index -> register row
    event_rows: dict[tuple[int, int], _Row] = field(default_factory=dict)  # (CT, event) -> row
    last_event_row: dict[int, _Row] = field(default_factory=dict)  # CT index -> row
    errors: list[RowError] = field(default_factory=list)


def _apply_ct_rows(doc: dict, rows: list[_Row], result: SheetImportResult) -> _Applied:
    applied = _Applied(doc)
    index = {c["code"]: i for i, c in enumerate(doc["cts"])}
    seen: dict[str, int] = {}
    for row in rows:
        values = row.values
        code = values["ct"]
        if code is _BAD:
            continue
        if code in seen:
            applied.errors.append(
                row.where("ct", f"CT {code} of site {values['site']} is also in row {seen[code]}")
            )
            continue
        seen[code] = row.number
        if any(v is _BAD for v in values.values()):
            continue
        i = index.get(code)
        before = doc["cts"][i] if i is not None else None
        entry = dict(before) if before is not None else {"code": code}
        for column, value in values.items():
            key = _CT_KEYS.get(column)
            if key is None or key == "code":
                continue
            if column == "terminals" and value is not None:
                terminals, secondary = value
                entry["terminals"] = {name: num(p) for name, p in terminals.items()}
                if secondary is not None:
                    given = values.get("secondary_a")
                    if given is None:
                        entry["secondary_a"] = num(secondary)
                    elif float(given) != secondary:
                        applied.errors.append(
                            row.where(
                                "terminals",
                                f"names a {num(secondary)} A secondary, but the secondary "
                                f"column says {given} A",
                            )
                        )
                continue
            if value is None:
                entry.pop(key, None)
            else:  # parsed cells are shared between rows: each CT gets its own list
                entry[key] = list(value) if isinstance(value, list) else value
        if before is None:
            index[code] = len(doc["cts"])
            doc["cts"].append(entry)
            result.created += 1
        elif entry != before:
            doc["cts"][i] = entry
            result.updated += 1
        else:
            result.unchanged += 1
        applied.ct_rows[index[code]] = row
    return applied


def _apply_tap_rows(doc: dict, rows: list[_Row], result: SheetImportResult) -> _Applied:
    applied = _Applied(doc)
    index = {c["code"]: i for i, c in enumerate(doc["cts"])}
    by_ct: dict[int, list[_Row]] = defaultdict(list)
    for row in rows:
        values = row.values
        if values["ct"] is _BAD:
            continue
        i = index.get(values["ct"])
        if i is None:
            applied.errors.append(
                row.where("ct", f"site {values['site']} has no CT {values['ct']!r}")
            )
            continue
        if any(v is _BAD for v in values.values()):
            continue
        by_ct[i].append(row)
    for i, ct_rows in by_ct.items():
        ct = dict(doc["cts"][i])
        events = [dict(e) for e in ct.get("tap_changes", [])]
        stored_last = events[-1]["at"] if events else None
        known = {(e["at"], tuple(e["from"]), tuple(e["to"])): e for e in events}
        new: list[tuple[dict, _Row]] = []
        for row in ct_rows:
            v = row.values
            reason = " ".join(x for x in (v.get("work_order"), v.get("reason")) if x)
            event = {"from": list(v["from"]), "to": list(v["to"]), "at": v["changed_at"]}
            if v.get("changed_by"):
                event["by"] = v["changed_by"]
            if reason:
                event["reason"] = reason
            key = (event["at"], tuple(event["from"]), tuple(event["to"]))
            if key in known:
                result.unchanged += 1
                continue
            known[key] = event
            new.append((event, row))
            result.created += 1
        if not new:
            continue
        events += [e for e, _ in new]
        events.sort(key=lambda e: _sort_key(e["at"]))
        rows_of = {id(e): r for e, r in new}
        for j, event in enumerate(events):
            if id(event) in rows_of:
                applied.event_rows[(i, j)] = rows_of[id(event)]
        last = events[-1]
        if id(last) in rows_of and (
            stored_last is None or _sort_key(last["at"]) >= _sort_key(stored_last)
        ):
            row = rows_of[id(last)]
            applied.last_event_row[i] = row
            if len(events) == 1 and list(last["from"]) != list(ct["in_use"]):
                applied.errors.append(
                    row.where(
                        "from",
                        f"the tap in use of {ct['code']} is {format_tap(ct['in_use'])}; the "
                        f"newest change must start from it",
                    )
                )
            ct["in_use"] = list(last["to"])
            result.tap_changes.append(
                f"{doc['site']['code']} {ct['code']}: {format_tap(last['from'])} -> "
                f"{format_tap(last['to'])}"
            )
        ct["tap_changes"] = events
        doc["cts"][i] = ct
    return applied


def _sort_key(at: str) -> dt.datetime:
    return dt.datetime.fromisoformat(at.replace("Z", "+00:00"))


# -- validator errors back to rows ---------------------------------------------------------------


def _tokens(pointer: str) -> list[str]:
    return [t.replace("~1", "/").replace("~0", "~") for t in pointer.split("/")[1:]]


def _resolve(doc: Any, tokens: list[str]) -> Any:
    for token in tokens:
        if isinstance(doc, list) and token.isdigit() and int(token) < len(doc):
            doc = doc[int(token)]
        elif isinstance(doc, dict) and token in doc:
            doc = doc[token]
        else:
            return None
    return doc


_AT_CT = re.compile(r" at /cts/(\d+)\)")


def _row_errors(applied: _Applied, errors: list[Any], kind: str) -> Iterator[RowError]:
    doc = applied.doc
    site = doc["site"]["code"]
    ct_row_by_code = {doc["cts"][i]["code"]: row for i, row in applied.ct_rows.items()}

    def rows_named(match: re.Match[str]) -> str:
        row = applied.ct_rows.get(int(match[1]))
        return f", row {row.number})" if row is not None else ")"

    for error in errors:
        tokens = _tokens(error.pointer)
        # "(CB-1-A at /cts/6)": a spreadsheet user finds the other CT by its row.
        message = _AT_CT.sub(rows_named, error.message)
        if len(tokens) >= 2 and tokens[0] == "cts" and tokens[1].isdigit():
            i = int(tokens[1])
            key = tokens[2] if len(tokens) > 2 else ""
            if kind == "tap_changes":
                if key == "tap_changes" and len(tokens) >= 4 and tokens[3].isdigit():
                    row = applied.event_rows.get((i, int(tokens[3])))
                    column = _EVENT_COLUMN_OF_KEY.get(
                        tokens[4] if len(tokens) > 4 else "", "changed_at"
                    )
                    if row is not None:
                        yield row.where(column, message)
                        continue
                    others = [r for (ci, _), r in applied.event_rows.items() if ci == i]
                    if others:
                        at = _resolve(doc, [*tokens[:4], "at"])
                        yield others[0].where(
                            "changed_at", f"the recorded change of {at}: {message}"
                        )
                        continue
                if key == "in_use" and i in applied.last_event_row:
                    yield applied.last_event_row[i].where("to", message)
                    continue
            else:
                row = applied.ct_rows.get(i)
                if row is not None:
                    if key == "tap_changes":
                        at = _resolve(doc, [*tokens[:4], "at"])
                        yield row.where("terminals", f"the recorded tap change of {at}: {message}")
                        continue
                    column = _CT_COLUMN_OF_KEY.get(key, "")
                    if column:
                        yield row.where(column, message)
                    else:
                        yield RowError(row.number, "", None, f"{'/'.join(tokens[2:])}: {message}")
                    continue
        # Elsewhere in the site: a wire or contact naming a CT terminal the sheet took away.
        value = _resolve(doc, tokens)
        if isinstance(value, str) and value.partition(":")[0] in ct_row_by_code:
            row = ct_row_by_code[value.partition(":")[0]]
            yield row.where("terminals", f"site {site} {error.pointer}: {message}")
            continue
        yield RowError(None, "", None, f"site {site} {error.pointer}: {message}")


# -- the import -----------------------------------------------------------------------------------


class _DryRun(Exception):
    pass


def import_table(
    table: Table,
    *,
    kind: str,
    mapping: dict[str, str | None] | None = None,
    dry_run: bool = False,
    user: Any = None,
    progress: Callable[[int, int], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
) -> SheetImportResult:
    """Import the rows of ``table`` (a CT register, ``kind="cts"``, or a tap-change log,
    ``kind="tap_changes"``) atomically; raises ``SheetImportError`` with every error and writes
    nothing when anything is wrong, ``ImportCancelled`` when ``cancelled()`` turns true.
    ``progress(done, total)`` is called per chunk of sites."""
    # The import builds millions of small dicts and lists that live to the end: the cyclic
    # collector would walk them again and again for nothing (it is back on when this returns).
    paused = gc.isenabled()
    gc.disable()
    try:
        return _import_table(table, kind, mapping, dry_run, user, progress, cancelled)
    finally:
        if paused:
            gc.enable()


def _import_table(
    table: Table,
    kind: str,
    mapping: dict[str, str | None] | None,
    dry_run: bool,
    user: Any,
    progress: Callable[[int, int], None] | None,
    cancelled: Callable[[], bool] | None,
) -> SheetImportResult:
    from inventory.selectors import site_documents
    from inventory.services import site_record_change
    from inventory.sitefile.validate import validate_site_document

    try:
        mapped = map_headers(table.headers, kind, mapping)
    except HeaderError as exc:
        raise SheetImportError(
            [RowError(1, header, header or None, message) for header, message in exc.problems]
        ) from None
    rows, errors = _rows(table, mapped)
    result = SheetImportResult(kind=kind, dry_run=dry_run, rows=len(rows))

    codes = {r.values["site"] for r in rows if isinstance(r.values.get("site"), str)}
    site_ids = dict(models.Site.objects.filter(code__in=codes).values_list("code", "id"))
    by_site: dict[int, list[_Row]] = defaultdict(list)
    for row in rows:
        code = row.values.get("site")
        if code is _BAD or code is None:
            continue
        if code not in site_ids:
            errors.append(
                row.where(
                    "site",
                    f"no site {code!r} in the record (import its site file first)",
                )
            )
            continue
        by_site[site_ids[code]].append(row)
    result.sites = len(by_site)
    apply = _apply_ct_rows if kind == "cts" else _apply_tap_rows
    source = "spreadsheet import"
    ordered = sorted(by_site)
    try:
        with transaction.atomic():
            for start in range(0, len(ordered), CHUNK_SITES):
                chunk = ordered[start : start + CHUNK_SITES]
                # Lock first, then read: nobody changes these sites between check and write.
                list(models.Site.objects.select_for_update().filter(pk__in=chunk).values_list("pk"))
                docs = site_documents(chunk)
                for sid in chunk:
                    before = docs[sid]
                    doc = {**before, "cts": list(before["cts"])}
                    applied = apply(doc, by_site[sid], result)
                    errors += applied.errors
                    if doc["cts"] == before["cts"]:
                        continue
                    problems = validate_site_document(doc)
                    if problems:
                        errors += _row_errors(applied, problems, kind)
                    if errors:
                        continue  # keep checking; nothing will be written
                    written = ImportResult(site=doc["site"]["code"], dry_run=dry_run)
                    upsert_site(doc, written, user, source=source)
                    if written.changed:
                        site_record_change(site_id=sid)
                    if kind == "cts":
                        result.tap_changes += [f"{written.site} {t}" for t in written.tap_changes]
                    for counter in (written.created, written.updated, written.deleted):
                        result.written.update(counter)
                if progress is not None:
                    progress(min(start + CHUNK_SITES, len(ordered)), len(ordered))
                if cancelled is not None and cancelled():
                    raise ImportCancelled
            if errors:
                raise SheetImportError(errors)
            if dry_run:
                raise _DryRun
    except _DryRun:
        pass
    if errors:  # errors found before any site was read (no site at all to import)
        raise SheetImportError(errors)
    return result
