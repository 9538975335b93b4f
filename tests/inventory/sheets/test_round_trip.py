"""Export → import changes nothing; an edited register or a tap-change log gives exactly the
expected changes, tap changes recorded as events (issue 12 items 3, 5 and 6; invented data)."""

from __future__ import annotations

import pytest
from django.core.management import call_command
from openpyxl import load_workbook

from inventory import models
from inventory.selectors import site_documents
from inventory.sheets import SheetImportError, import_table, read_path, read_table
from tests.inventory.sheets.helpers import csv_bytes, load_demo


def _history_rows() -> int:
    return sum(
        m.history.count()
        for m in (models.CurrentTransformer, models.Terminal, models.TapChange, models.Site)
    )


@pytest.mark.django_db
@pytest.mark.parametrize("kind", ["cts", "tap_changes"])
@pytest.mark.parametrize("fmt", ["xlsx", "csv"])
def test_export_then_import_changes_nothing(tmp_path, kind, fmt, capsys):
    load_demo()
    docs = site_documents(models.Site.objects.values_list("pk", flat=True))
    revisions = list(models.Site.objects.order_by("pk").values_list("revision", flat=True))
    history = _history_rows()
    path = tmp_path / f"out.{fmt}"
    call_command("export_sheet", "--kind", kind, str(path), "--no-progress")
    call_command("import_sheet", str(path), "--no-progress")
    out = capsys.readouterr().out.splitlines()
    n = 40 if kind == "cts" else 12  # the demo's CTs and recorded tap changes
    noun = "CT" if kind == "cts" else "tap change"
    assert out[-1] == (
        f"{n} {noun} row(s) over 2 site(s): 0 created, 0 updated, {n} unchanged (were written)"
    )
    assert site_documents(models.Site.objects.values_list("pk", flat=True)) == docs
    assert list(models.Site.objects.order_by("pk").values_list("revision", flat=True)) == revisions
    assert _history_rows() == history


@pytest.mark.django_db
def test_an_edited_register_gives_exactly_the_expected_changes(tmp_path, capsys):
    load_demo()
    path = tmp_path / "qfn.xlsx"
    call_command("export_sheet", "--kind", "cts", "--site", "QFN", str(path), "--no-progress")
    book = load_workbook(path)
    ws = book.active
    headers = [c.value for c in ws[1]]
    col = {h: i for i, h in enumerate(headers)}
    for row in ws.iter_rows(min_row=2):
        code = row[col["ct"]].value
        if code == "CB-132-A":
            row[col["in_use"]].value = "X1-X4"  # re-tapped to 800:5
        if code == "CB-131-A":
            row[col["winding_ohm"]].value = 0.63
    ws.append(
        ["QFN", "CB-133", "CB-133-N", "N", None, 5, "600:5 MR", "X1-X4", "C400", None, 0.3, 1, None]
    )
    book.save(path)
    taps_before = models.TapChange.objects.count()
    capsys.readouterr()

    call_command("import_sheet", str(path), "--no-progress")

    out = capsys.readouterr().out.splitlines()
    assert out == [
        "28 CT row(s) over 1 site(s): 1 created, 2 updated, 25 unchanged (were written)",
        "tap change recorded: QFN CB-132-A: X1-X5 -> X1-X4",
    ]
    ct = models.CurrentTransformer.objects.get(site__code="QFN", code="CB-131-A")
    assert ct.winding_ohm == 0.63
    change = models.TapChange.objects.exclude(changed_by="D. Lorrimer").latest("id")
    assert models.TapChange.objects.count() == taps_before + 1
    assert (change.ct.code, change.from_tap, change.to_tap, change.changed_by, change.reason) == (
        "CB-132-A",
        ["X1", "X5"],
        ["X1", "X4"],
        "spreadsheet import",
        "tap in use changed by spreadsheet import",
    )
    new = models.CurrentTransformer.objects.get(site__code="QFN", code="CB-133-N")
    # 600:5 MR fills the standard positions (reference.md's multi-ratio table, S4).
    positions = dict(new.ct_terminals.values_list("name", "position_a"))
    assert positions == {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600}
    # And the export is now the edited file, cell for cell.
    again = tmp_path / "again.xlsx"
    call_command("export_sheet", "--kind", "cts", "--site", "QFN", str(again), "--no-progress")
    edited = read_path(path).rows
    exported = read_path(again).rows
    key = lambda r: r[2]  # noqa: E731
    edited_sorted = sorted(edited, key=key)
    edited_sorted[[r[2] for r in edited_sorted].index("CB-133-N")][6] = (
        "X1=0;X2=100;X3=150;X4=400;X5=600"
    )
    assert sorted(exported, key=key) == edited_sorted


@pytest.mark.django_db
def test_a_tap_change_log_adds_events_and_moves_the_tap():
    load_demo()
    rows = [
        ["Site", "CT", "From", "To", "Changed at", "Work order", "Changed by", "Reason"],
        [
            "QFN",
            "CB-132-B",
            "X1-X5",
            "X2-X4",
            "2026-01-05 08:00",
            "WO-26-0001",
            "R. Tamsin",
            "relay replaced",
        ],
    ]
    before = models.TapChange.objects.count()
    result = import_table(read_table(csv_bytes(rows), name="log.csv"), kind="tap_changes")
    assert (result.created, result.unchanged) == (1, 0)
    assert result.tap_changes == ["QFN CB-132-B: X1-X5 -> X2-X4"]
    assert models.TapChange.objects.count() == before + 1  # the event, no second "now" event
    change = models.TapChange.objects.latest("id")
    assert (change.from_tap, change.to_tap, change.changed_by, change.reason) == (
        ["X1", "X5"],
        ["X2", "X4"],
        "R. Tamsin",
        "WO-26-0001 relay replaced",
    )
    assert change.changed_at.isoformat() == "2026-01-05T08:00:00+00:00"
    roles = dict(
        models.Terminal.objects.filter(ct__code="CB-132-B", ct__site__code="QFN")
        .exclude(tap_role="")
        .values_list("tap_role", "name")
    )
    assert roles == {"first": "X2", "second": "X4"}
    again = import_table(read_table(csv_bytes(rows), name="log.csv"), kind="tap_changes")
    assert (again.created, again.unchanged) == (0, 1)


@pytest.mark.django_db
def test_a_log_event_must_start_from_the_tap_in_use():
    load_demo()
    rows = [
        ["site", "ct", "from", "to", "changed_at"],
        ["QFN", "CB-132-C", "X1-X4", "X2-X4", "2026-01-05T08:00:00Z"],
        ["QFN", "CB-999", "X1-X4", "X2-X4", "2026-01-05T08:00:00Z"],
        ["QFN", "CB-131-A", "X1-X5", "X2-X4", "yesterday"],
    ]
    with pytest.raises(SheetImportError) as caught:
        import_table(read_table(csv_bytes(rows), name="log.csv"), kind="tap_changes")
    assert [(e.row, e.column, e.value, e.message) for e in caught.value.errors] == [
        (
            2,
            "from",
            "X1-X4",
            "the tap in use of CB-132-C is X1-X5; the newest change must start from it",
        ),
        (3, "ct", "CB-999", "site QFN has no CT 'CB-999'"),
        (4, "changed_at", "yesterday", "must be a date and time such as 2024-03-05T10:00:00Z"),
    ]


def test_xlsx_reader_sees_numbers_and_text_as_written():
    from tests.inventory.sheets.helpers import xlsx_bytes

    data = xlsx_bytes(
        [
            ["site", "ct", "winding_ohm"],
            ["QFN", "CB-1", 0.61],
            [None, None, None],
            ["QFN", "CB-2", "0.5"],
        ]
    )
    table = read_table(data, name="r.xlsx")
    assert table.numbers == [2, 4]  # a blank row is skipped, the numbers stay the sheet's
    assert table.rows == [["QFN", "CB-1", 0.61], ["QFN", "CB-2", "0.5"]]
