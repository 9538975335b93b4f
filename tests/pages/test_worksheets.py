"""Work sheets from the pages: a PDF from a verified plan or a safe, fresh stored procedure;
otherwise a page that says why not (409) and no PDF."""

from __future__ import annotations

import io

import pytest
from pypdf import PdfReader

from inventory import models as inv
from inventory.services import procedure_save

pytestmark = pytest.mark.django_db


def pdf_text(response) -> str:
    assert response.status_code == 200
    assert response["Content-Type"] == "application/pdf"
    reader = PdfReader(io.BytesIO(response.content))
    return " ".join(" ".join(page.extract_text() for page in reader.pages).split())


def test_plan_worksheet_is_a_pdf_with_steps_readings_and_cautions(demo, viewer):
    site = inv.Site.objects.get(code="QFN")
    text = pdf_text(viewer.get("/sites/QFN/devices/R-132/worksheet.pdf"))
    assert "device R-132" in text
    assert f"record revision {site.revision}" in text
    assert "TS-132/T1" in text and "1.58" in text  # the trips first; readings to record
    assert "not a switching order" in text  # the cautions


def test_safe_fresh_procedure_worksheet(demo, viewer):
    text = pdf_text(viewer.get("/sites/QFN/procedures/P-R132-OUT/worksheet.pdf"))
    assert "P-R132-OUT" in text and "TS-132/N" in text
    assert "not a switching order" in text


def test_unsafe_procedure_prints_no_sheet_and_says_why(demo, viewer):
    response = viewer.get("/sites/QFN/procedures/P-R133-OUT-DRAFT/worksheet.pdf")
    assert response.status_code == 409
    assert response["Content-Type"].startswith("text/html")
    page = response.content.decode()
    assert "not safe" in page and "step 3" in page and "open_secondary" in page


def test_no_plan_no_sheet(demo, viewer):
    response = viewer.get("/sites/QFN/devices/86B/worksheet.pdf")
    assert response.status_code == 409
    assert "NOT PRINTED" in response.content.decode()


def test_stale_procedure_prints_no_sheet(demo, viewer):
    # a write whose recompute has not run yet (its on-commit callback is never executed
    # inside the test's transaction): the stored verdicts are now stale
    proc = inv.Procedure.objects.get(site__code="QFN", code="P-R131-CASE")
    proc.title = "Remove R-131 (case), title edited"
    procedure_save(procedure=proc)
    site = inv.Site.objects.get(code="QFN")
    response = viewer.get("/sites/QFN/procedures/P-R132-OUT/worksheet.pdf")
    assert response.status_code == 409
    assert f"revision {site.revision}" in response.content.decode()
