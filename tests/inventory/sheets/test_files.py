"""What the reader refuses or converts (issue 12 items 2 and 4): formulas, merged cells, no
header, an empty file, a file that is not a spreadsheet, a file over the limit, unknown columns;
units in headers and a mapping file. Nothing is written on any refusal."""

from __future__ import annotations

import json

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError

from inventory import models
from inventory.sheets import (
    MAX_BYTES,
    SheetFileError,
    SheetImportError,
    guess_kind,
    import_table,
    read_table,
)
from tests.inventory.sheets.helpers import csv_bytes, load_demo, xlsx_bytes

HEADER = ["site", "ct", "winding_ohm"]


def test_formulas_are_refused_with_their_cells():
    data = xlsx_bytes([HEADER, ["QFN", "CB-131-A", "=0.3*2"], ["QFN", "CB-131-B", "=B2"]])
    with pytest.raises(SheetFileError) as caught:
        read_table(data, name="reg.xlsx")
    assert str(caught.value) == (
        "reg.xlsx, sheet 'Sheet': cells C2, C3 hold formulas; the import takes values only "
        "(copy the sheet and paste values, then import that)"
    )


def test_merged_cells_are_refused():
    data = xlsx_bytes(
        [HEADER, ["QFN", "CB-131-A", 0.3], [None, "CB-131-B", 0.3]],
        build=lambda ws: ws.merge_cells("A2:A3"),
    )
    with pytest.raises(SheetFileError, match=r"merged cells A2:A3; unmerge them"):
        read_table(data, name="reg.xlsx")


@pytest.mark.parametrize(
    ("data", "message"),
    [
        (b"", "reg.csv: the file is empty"),
        (b"  \n\n", "reg.csv: the file is empty"),
        (b"\x00\x01\x02binary", "reg.csv: not a spreadsheet this import reads (XLSX or CSV)"),
        (b"PK\x03\x04broken zip", "reg.csv: not a spreadsheet this import reads (XLSX or CSV)"),
        (
            b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1rest",
            "reg.csv: an old-style .xls workbook; save it as .xlsx (or CSV) and import that",
        ),
        (b"site,ct\n", "reg.csv: no data rows below the headers"),
        (b",,\nQFN,CB-131-A,1\n", "reg.csv: row 1 is blank; the first row must name the columns"),
    ],
)
def test_unreadable_files_get_a_clear_message(data, message):
    with pytest.raises(SheetFileError) as caught:
        read_table(data, name="reg.csv")
    assert str(caught.value).startswith(message)


def test_a_header_row_of_values_is_no_header():
    data = xlsx_bytes([["QFN", "CB-131-A", 0.3]])
    with pytest.raises(SheetFileError, match=r"row 1 holds values, not column names \(0.3\)"):
        read_table(data, name="reg.xlsx")


def test_a_file_over_the_limit_is_refused_before_reading():
    with pytest.raises(SheetFileError, match=r"the file is 10.0 MB; the limit is 10 MB"):
        read_table(b"x" * (MAX_BYTES + 1), name="big.csv")


@pytest.mark.django_db
def test_unknown_and_missing_columns_are_reported_in_row_one():
    load_demo()
    table = read_table(csv_bytes([["Site", "Notes", "Colour"], ["QFN", "x", "red"]]), name="r.csv")
    with pytest.raises(SheetImportError) as caught:
        import_table(table, kind="cts")
    known = (
        "unknown column (columns: site, equipment, ct, phase, set, secondary_a, terminals, "
        "in_use, accuracy, rated_burden_va, winding_ohm, rating_factor, serial; a mapping file "
        "can name it or ignore it)"
    )
    assert [(e.row, e.column, e.message) for e in caught.value.errors] == [
        (1, "", "the required column ct is missing"),
        (1, "Colour", known),
        (1, "Notes", known),
    ]


@pytest.mark.django_db
def test_units_in_headers_are_converted_and_blanks_stay_blank():
    load_demo()
    rows = [
        ["Site", "CT", "Winding resistance (mΩ)", "Rated burden (VA)", "Serial number"],
        ["QFN", "CB-132-A", 655, None, None],
    ]
    import_table(read_table(xlsx_bytes(rows), name="r.xlsx"), kind="cts")
    ct = models.CurrentTransformer.objects.get(site__code="QFN", code="CB-132-A")
    assert ct.winding_ohm == pytest.approx(0.655, rel=1e-12)  # 655 mΩ = 0.655 Ω
    assert ct.rated_burden_va is None  # a blank cell is no value, never NaN
    assert ct.nameplate == ""


@pytest.mark.django_db
def test_a_wrong_unit_for_a_column_is_reported():
    load_demo()
    table = read_table(
        csv_bytes([["site", "ct", "winding_ohm (ft)"], ["QFN", "CB-1", 1]]), name="r.csv"
    )
    with pytest.raises(SheetImportError) as caught:
        import_table(table, kind="cts")
    assert [(e.row, e.column, e.message) for e in caught.value.errors] == [
        (
            1,
            "winding_ohm (ft)",
            "unit (ft) is not one winding_ohm can be given in "
            "(Ω, ohm, ohms, mΩ, mohm, milliohm, milliohms)",
        ),
    ]


@pytest.mark.django_db
def test_mapping_file_names_a_utilitys_own_headers(tmp_path, capsys):
    load_demo()
    mapping = tmp_path / "map.json"
    mapping.write_text(
        json.dumps(
            {
                "columns": {
                    "Stn": "site",
                    "Xfmr ID": "ct",
                    "Rct (mΩ)": "winding_ohm",
                    "Comments": None,
                }
            }
        )
    )
    sheet = tmp_path / "reg.csv"
    sheet.write_bytes(
        csv_bytes([["Stn", "Xfmr ID", "Rct (mΩ)", "Comments"], ["QFN", "CB-132-B", 640, "checked"]])
    )
    call_command("import_sheet", str(sheet), "--mapping", str(mapping))  # with its progress bar
    assert capsys.readouterr().out.splitlines()[0] == (
        "1 CT row(s) over 1 site(s): 0 created, 1 updated, 0 unchanged (were written)"
    )
    ct = models.CurrentTransformer.objects.get(site__code="QFN", code="CB-132-B")
    assert ct.winding_ohm == pytest.approx(0.64, rel=1e-12)


@pytest.mark.django_db
def test_command_exits_2_with_every_error_and_writes_nothing(tmp_path, capsys):
    load_demo()
    before = models.CurrentTransformer.history.count()
    sheet = tmp_path / "reg.csv"
    sheet.write_bytes(
        csv_bytes([["site", "ct", "phase"], ["QFN", "CB-131-A", "Q"], ["QFN", "CB-131-B", "Z"]])
    )
    with pytest.raises(CommandError) as caught:
        call_command("import_sheet", str(sheet), "--no-progress")
    assert caught.value.returncode == 2
    assert capsys.readouterr().err.splitlines() == [
        "row 2, column 'phase' ('Q'): must be one of 'A', 'B', 'C', 'N', got 'Q'",
        "row 3, column 'phase' ('Z'): must be one of 'A', 'B', 'C', 'N', got 'Z'",
    ]
    assert models.CurrentTransformer.history.count() == before


def test_the_kind_is_told_from_the_headers():
    assert guess_kind(["Site", "CT", "From", "To", "Changed at"]) == "tap_changes"
    assert guess_kind(["Site", "CT", "Tap in use"]) == "cts"
