"""The row/column error report (issue 12 items 2 and 4): every bad row of a register is reported
with its spreadsheet row number (header = row 1), the header as the file writes it, the value as
written and what is wrong; nothing is written. Data invented (the demo sites); the rules the
messages state are the site file's (its validator), so a sheet and a site file agree."""

from __future__ import annotations

import pytest

from inventory import models
from inventory.sheets import SheetImportError, import_table, read_table
from tests.inventory.sheets.helpers import csv_bytes, load_demo

HEADERS = [
    "Site",
    "Equipment",
    "CT",
    "Phase",
    "Set",
    "Secondary (A)",
    "Terminals",
    "Tap in use",
    "Accuracy class",
    "Rated burden (VA)",
    "Winding resistance (mΩ)",
    "RF",
    "Serial number",
]
MR = "X1=0;X2=200;X3=300;X4=800;X5=1200"

# One bad row per kind of mistake: (row as written, [(header, value, message), ...]).
BAD_ROWS = [
    (
        ["NOPE", "CB-131", "CB-131-A", "A", "", 5, MR, "X1-X5", "C800", "", 610, 2, ""],
        [("Site", "NOPE", "no site 'NOPE' in the record (import its site file first)")],
    ),
    (
        ["", "CB-131", "CB-131-A", "A", "", 5, MR, "X1-X5", "C800", "", 610, 2, ""],
        [("Site", None, "required; the cell is blank")],
    ),
    (
        ["QFN", "CB-131", "", "A", "", 5, MR, "X1-X5", "C800", "", 610, 2, ""],
        [("CT", None, "required; the cell is blank")],
    ),
    (
        ["QFN", "CB-999", "CB-131-A", "A", "CB-131-R", 5, MR, "X1-X5", "C800", "", 610, 2, ""],
        [("Equipment", "CB-999", "unknown equipment 'CB-999'")],
    ),
    (
        ["QFN", "CB-131", "CB-131-B", "D", "CB-131-R", 5, MR, "X1-X5", "C800", "", 610, 2, ""],
        [("Phase", "D", "must be one of 'A', 'B', 'C', 'N', got 'D'")],
    ),
    (
        ["QFN", "CB-131", "CB-131-C", "A", "CB-131-R", 5, MR, "X1-X5", "C800", "", 610, 2, ""],
        [
            (
                "Phase",
                "A",
                "set 'CB-131-R' already has a phase A CT (CB-131-A, row 5)",
            )
        ],
    ),
    (
        ["QFN", "CB-132", "CB-132-A", "A", "CB-132-R", "five", MR, "X1-X5", "C800", "", 610, 2, ""],
        [("Secondary (A)", "five", "must be a number")],
    ),
    (
        ["QFN", "CB-132", "CB-132-B", "B", "CB-132-R", 2, MR, "X1-X5", "C800", "", 610, 2, ""],
        [("Secondary (A)", "2", "must be one of 1, 5, got 2")],
    ),
    (
        ["QFN", "CB-132", "CB-132-C", "C", "CB-132-R", 5, "X1:0", "X1-X5", "C800", "", 610, 2, ""],
        [
            (
                "Terminals",
                "X1:0",
                "'X1:0' is not NAME=POSITION; write the winding as X1=0;X2=100;... or a full "
                "ratio such as 600:5 MR",
            )
        ],
    ),
    (
        [
            "QFN",
            "CB-133",
            "CB-133-A",
            "A",
            "CB-133-R",
            5,
            "700:5 MR",
            "X1-X5",
            "C800",
            "",
            610,
            2,
            "",
        ],
        [
            (
                "Terminals",
                "700:5 MR",
                "no standard multi-ratio table for '700:5 MR' (known: 600:5 MR, 1200:5 MR, "
                "2000:5 MR, 3000:5 MR, 4000:5 MR, 5000:5 MR); give the positions as "
                "X1=0;X2=...;X5=...",
            )
        ],
    ),
    (
        [
            "QFN",
            "CB-133",
            "CB-133-B",
            "B",
            "CB-133-R",
            5,
            "X1=0;X2=0;X5=1200",
            "X1-X5",
            "C800",
            "",
            610,
            2,
            "",
        ],
        [
            (
                "Terminals",
                "X1=0;X2=0;X5=1200",
                "position 0 is also that of X1; two terminals cannot sit at the same point of "
                "the winding",
            ),
            # The CT's recorded history names terminals the new winding no longer has.
            *[
                (
                    "Terminals",
                    "X1=0;X2=0;X5=1200",
                    f"the recorded tap change of {at}: the CT has no terminal {name!r} "
                    "(it has X1, X2, X5)",
                )
                for at, name in (
                    ("2012-05-02T09:00:00Z", "X3"),
                    ("2012-05-02T09:00:00Z", "X4"),
                    ("2025-06-12T15:10:00Z", "X4"),
                )
            ],
        ],
    ),
    (
        [
            "QFN",
            "CB-133",
            "CB-133-C",
            "C",
            "CB-133-R",
            5,
            "X1=0;X2=abc",
            "X1-X2",
            "C800",
            "",
            610,
            2,
            "",
        ],
        [
            (
                "Terminals",
                "X1=0;X2=abc",
                "position of X2 must be a number of primary amperes, got 'abc'",
            )
        ],
    ),
    (
        [
            "QFN",
            "CB-130",
            "CB-130-DA",
            "A",
            "CB-130-D",
            5,
            "2000:5 MR",
            "X1",
            "C800",
            "",
            950,
            2,
            "",
        ],
        [("Tap in use", "X1", "a tap is two terminals such as X1-X4, got 'X1'")],
    ),
    (
        [
            "QFN",
            "CB-130",
            "CB-130-DB",
            "B",
            "CB-130-D",
            5,
            "2000:5 MR",
            "X1-X9",
            "C800",
            "",
            950,
            2,
            "",
        ],
        [
            (
                "Tap in use",
                "X1-X9",
                "the CT has no terminal 'X9' (it has X1, X2, X3, X4, X5)",
            )
        ],
    ),
    (
        [
            "QFN",
            "CB-130",
            "CB-130-DC",
            "C",
            "CB-130-D",
            5,
            "2000:5 MR",
            "X2-X2",
            "C800",
            "",
            950,
            2,
            "",
        ],
        [("Tap in use", "X2-X2", "both terminals are 'X2'; a tap needs two different terminals")],
    ),
    (
        [
            "QFN",
            "CB-131",
            "CB-131-DA",
            "A",
            "CB-131-D",
            5,
            "2000:5 MR",
            "X1-X5",
            "Q99",
            "",
            950,
            2,
            "",
        ],
        [
            (
                "Accuracy class",
                "Q99",
                "accuracy 'Q99' is not a class: expected IEEE relaying C10..C800 / K.. / T.., "
                "IEEE metering like 0.3B0.9, IEC 5P20 / 10P10, PX / PXR, or IEC metering 0.1, "
                "0.2, 0.2S, 0.5, 0.5S, 1, 3, 5",
            )
        ],
    ),
    (
        [
            "QFN",
            "CB-131",
            "CB-131-DB",
            "B",
            "CB-131-D",
            5,
            "2000:5 MR",
            "X1-X5",
            "C800",
            -5,
            950,
            2,
            "",
        ],
        [("Rated burden (VA)", "-5", "must be greater than 0, got -5")],
    ),
    (
        [
            "QFN",
            "CB-131",
            "CB-131-DC",
            "C",
            "CB-131-D",
            5,
            "2000:5 MR",
            "X1-X5",
            "C800",
            "",
            "abc",
            2,
            "",
        ],
        [("Winding resistance (mΩ)", "abc", "must be a number")],
    ),
    (
        [
            "QFN",
            "CB-132",
            "CB-132-DA",
            "A",
            "CB-132-D",
            5,
            "2000:5 MR",
            "X1-X5",
            "C800",
            "",
            -200,
            2,
            "",
        ],
        [("Winding resistance (mΩ)", "-200", "must be greater than 0, got -0.2")],
    ),
    (
        [
            "QFN",
            "CB-132",
            "CB-132-DB",
            "B",
            "CB-132-D",
            5,
            "2000:5 MR",
            "X1-X5",
            "C800",
            "",
            950,
            0.5,
            "",
        ],
        [("RF", "0.5", "must be at least 1, got 0.5")],
    ),
    (
        [
            "QFN",
            "CB-132",
            "CB-132-DC",
            "C",
            "CB-132-D",
            1,
            "2000:5 MR",
            "X1-X5",
            "C800",
            "",
            950,
            2,
            "",
        ],
        [
            (
                "Terminals",
                "2000:5 MR",
                "names a 5 A secondary, but the secondary column says 1 A",
            )
        ],
    ),
    (
        ["QFN", "", "CB-200-A", "A", "", 5, "600:5 MR", "X1-X4", "C400", "", 300, 2, ""],
        [("Equipment", None, "required field is missing")],
    ),
    (
        ["QFN", "CB-133", "CB-133-DA", "A", "CB-133-D", 5, "2000:5 MR", "", "C800", "", 950, 2, ""],
        [("Tap in use", None, "required field is missing")],
    ),
    (
        ["QFN", "CB-133", "CB-131-A", "A", "CB-131-R", 5, MR, "X1-X5", "C800", "", 610, 2, ""],
        [("CT", "CB-131-A", "CT CB-131-A of site QFN is also in row 5")],
    ),
]


@pytest.mark.django_db
def test_every_bad_row_is_reported_with_row_header_value_and_message():
    load_demo()
    before = models.CurrentTransformer.history.count()
    rows = [HEADERS] + [row for row, _ in BAD_ROWS]
    table = read_table(csv_bytes(rows), name="register.csv")
    with pytest.raises(SheetImportError) as caught:
        import_table(table, kind="cts")
    got = [(e.row, e.column, e.value, e.message) for e in caught.value.errors]
    for line in got:
        print(line)
    expected = [
        (number, header, value, message)
        for number, (_, errors) in enumerate(BAD_ROWS, start=2)
        for header, value, message in errors
    ]
    assert len({e[3] for e in expected}) >= 20  # at least twenty kinds of mistake
    assert got == expected
    assert models.CurrentTransformer.history.count() == before  # nothing written
