"""The printable work sheet (issue 13 item 7): read back with pypdf, the sheet holds the site,
the work, the revision checked against, every step with its expected readings, sign-off lines
and the cautions on every page; an unsafe, impossible or stale answer prints no sheet. That a
sheet carries the cautions on every page and that only a safe, current check becomes one is
common practice, no source."""

from __future__ import annotations

import io
import json
import re
from pathlib import Path
from typing import Any

import pytest
from pypdf import PdfReader

from analysis.actions import isolation_plan, procedure_check
from analysis.drawing import circuit_svg
from analysis.engine.cautions import CAUTIONS
from analysis.worksheet import WorksheetRefused, worksheet_for_plan, worksheet_for_procedure
from tests.analysis.engine.builders import wye_panel

DEMO = Path(__file__).resolve().parents[3] / "fixtures" / "demo"


def _quillfen() -> dict[str, Any]:
    return json.loads((DEMO / "quillfen.json").read_text())


def _pages(pdf: bytes) -> list[str]:
    """The text of each page, whitespace folded (lines wrap where the layout wraps them)."""
    assert pdf.startswith(b"%PDF-")
    reader = PdfReader(io.BytesIO(pdf))
    return [re.sub(r"\s+", " ", page.extract_text()) for page in reader.pages]


def _caution_heads() -> list[str]:
    # the first words of each caution: enough to tell them apart, short enough not to wrap
    return [" ".join(c.split()[:8]) for c in CAUTIONS]


@pytest.fixture(scope="module")
def plan_sheet() -> tuple[dict[str, Any], bytes]:
    doc = _quillfen()
    plan = isolation_plan(doc, "R-131")
    assert plan["possible"] and plan["verdict"]["safe"]
    svg = circuit_svg(doc, device="R-131", highlight=["R-131"])
    pdf = worksheet_for_plan(plan, site_name=doc["site"]["name"], revision=12, svg=svg)
    return plan, pdf


def test_plan_sheet_content(plan_sheet: tuple[dict[str, Any], bytes]) -> None:
    plan, pdf = plan_sheet
    pages = _pages(pdf)
    text = " ".join(pages)
    assert len(pages) >= 2
    assert "QFN - Quillfen 115/13.8 kV" in text
    assert "device R-131" in text
    assert "Record revision checked against 12" in text
    for k, page in enumerate(pages, start=1):
        assert f"page {k} of {len(pages)}" in page
        assert "Work sheet QFN device R-131 (record revision 12)" in page  # the header
    # cover, the drawing on a landscape page of its own (it is wider than tall), the steps
    reader = PdfReader(io.BytesIO(pdf))
    shapes = [(float(p.mediabox.width), float(p.mediabox.height)) for p in reader.pages]
    assert shapes[0][0] < shapes[0][1]
    assert shapes[1][0] > shapes[1][1] and "Circuit (normal state)" in pages[1]
    assert all(w < h for w, h in shapes[2:])
    assert len(pages) == 4
    # every isolation and restore step, numbered on, with its why
    n_iso = len(plan["isolate"])
    assert "Isolation steps" in text and "Restore steps" in text
    assert "set TS-131/T1 to open" in text
    assert "set R-131/CASE to withdrawn" in text
    assert "set TS-131/T1 to closed" in text
    first_why = " ".join(plan["isolate"][0]["why"].replace("→", "->").split()[:6])
    assert first_why in text
    for n in range(1, n_iso + len(plan["restore"]) + 1):
        assert re.search(
            rf"(^| ){n} (set|note|add|remove|lift|land|insert|energize|deenergize)", text
        )
    # the expected readings beside a blank to write the reading taken
    reading = plan["isolate"][0]["readings"][0]
    a, b = reading["between"]
    assert f"{a} - {b}: {reading['a']:.2f} A" in text
    assert "________ A" in text
    assert "Done (initials)" in text
    for role in ("Prepared by", "Checked by", "Isolation carried out by", "Restored to service by"):
        assert role in pages[-1]
    assert "Signature" in pages[-1]


def test_cautions_on_every_page(plan_sheet: tuple[dict[str, Any], bytes]) -> None:
    _plan, pdf = plan_sheet
    for k, page in enumerate(_pages(pdf), start=1):
        for head in _caution_heads():
            assert head in page, f"page {k} lacks the caution {head!r}"


def test_same_answer_same_bytes(plan_sheet: tuple[dict[str, Any], bytes]) -> None:
    plan, pdf = plan_sheet
    doc = _quillfen()
    again = worksheet_for_plan(
        plan,
        site_name=doc["site"]["name"],
        revision=12,
        svg=circuit_svg(doc, device="R-131", highlight=["R-131"]),
    )
    assert again == pdf


def test_safe_procedure_sheet_lists_its_steps() -> None:
    doc = _quillfen()
    verdict = procedure_check(doc, "P-87B-CB131-OUT")
    assert verdict["safe"]
    proc = next(p for p in doc["procedures"] if p["code"] == "P-87B-CB131-OUT")
    pdf = worksheet_for_procedure(
        verdict,
        site_name=doc["site"]["name"],
        title=proc["title"],
        devices=proc["devices"],
        revision=4,
        checked_revision=4,
        svg=circuit_svg(doc, device="R-87B"),
    )
    pages = _pages(pdf)
    text = " ".join(pages)
    assert "procedure P-87B-CB131-OUT" in text
    assert proc["title"] in text
    assert "Restore steps" not in text  # a stored procedure's steps are one list
    for n in range(1, len(proc["steps"]) + 1):
        assert re.search(rf"(^| ){n} \S", text)
    for page in pages:
        for head in _caution_heads():
            assert head in page


def test_unsafe_procedure_prints_no_sheet() -> None:
    doc = _quillfen()
    verdict = procedure_check(doc, "P-R132-OUT-DRAFT")
    assert not verdict["safe"]
    danger = verdict["first_danger"]
    with pytest.raises(WorksheetRefused) as err:
        worksheet_for_procedure(
            verdict, site_name="x", title="t", devices=["R-132"], revision=1, checked_revision=1
        )
    reason = err.value.reason
    assert "not safe" in reason
    assert f"step {danger['step']} ({danger['stage']}): {danger['code']}" in reason


def test_stale_check_prints_no_sheet(plan_sheet: tuple[dict[str, Any], bytes]) -> None:
    plan, _pdf = plan_sheet
    with pytest.raises(WorksheetRefused, match="revision 11; the record is now at revision 12"):
        worksheet_for_plan(plan, site_name="x", revision=12, checked_revision=11)
    with pytest.raises(WorksheetRefused, match="stale"):
        worksheet_for_plan({**plan, "stale": True}, site_name="x", revision=12)


def test_impossible_plan_prints_no_sheet_and_says_why() -> None:
    # no test switch, no trip switch: nothing can isolate the relay
    plan = isolation_plan(wye_panel(trip=True).build(), "R-1")
    assert not plan["possible"]
    with pytest.raises(WorksheetRefused, match="No safe isolation plan for R-1: no sequence"):
        worksheet_for_plan(plan, site_name="x", revision=1)


def test_plan_sheet_names_what_else_loses_its_current() -> None:
    doc = _quillfen()
    plan = isolation_plan(doc, "R-132")
    assert plan["possible"] and plan["affected"]
    text = " ".join(_pages(worksheet_for_plan(plan, site_name="Quillfen", revision=2)))
    assert "Lost while the work is under way" in text
    for item in plan["affected"]:
        assert " ".join(item["message"].split()[:6]) in text
