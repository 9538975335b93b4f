"""``work_sheet``: the PDF of a plan or a safe stored procedure, written where asked; an unsafe
procedure or an impossible plan writes nothing and exits 3 with the reason (common practice,
no source: a crew acts on a sheet, so only a safe, current check becomes one)."""

from __future__ import annotations

import io
from pathlib import Path

from pypdf import PdfReader

from analysis.sources import EXIT_INPUT, EXIT_UNSAFE
from inventory.models import Site
from tests.analysis.cli.test_commands import run_status, stored  # noqa: F401 - a fixture


def _text(path: Path) -> str:
    reader = PdfReader(io.BytesIO(path.read_bytes()))
    return " ".join(" ".join(p.extract_text().split()) for p in reader.pages)


def test_plan_sheet_written(stored, tmp_path):  # noqa: F811 - the fixture
    out = tmp_path / "r131.pdf"
    stdout, _err, status = run_status("work_sheet", stored, "--device", "R-131", "--out", str(out))
    assert status == 0
    assert stdout.strip() == str(out)
    revision = Site.objects.get(code=stored).revision
    text = _text(out)
    assert "device R-131" in text
    assert f"Record revision checked against {revision}" in text
    assert "set R-131/CASE to withdrawn" in text


def test_safe_procedure_sheet_written(stored, tmp_path):  # noqa: F811 - the fixture
    out = tmp_path / "p.pdf"
    _out, _err, status = run_status(
        "work_sheet", stored, "--procedure", "P-87B-CB131-OUT", "--out", str(out)
    )
    assert status == 0
    assert "procedure P-87B-CB131-OUT" in _text(out)


def test_unsafe_procedure_writes_nothing(stored, tmp_path):  # noqa: F811 - the fixture
    out = tmp_path / "bad.pdf"
    _out, err, status = run_status(
        "work_sheet", stored, "--procedure", "P-R133-OUT-DRAFT", "--out", str(out)
    )
    assert status == EXIT_UNSAFE
    assert "no work sheet: Procedure P-R133-OUT-DRAFT is not safe" in err
    assert not out.exists()


def test_unknown_device_is_an_input_error(stored, tmp_path):  # noqa: F811 - the fixture
    _out, err, status = run_status("work_sheet", stored, "--device", "R-1311")
    assert status == EXIT_INPUT
    assert "no device 'R-1311'" in err
