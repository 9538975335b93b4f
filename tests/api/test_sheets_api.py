"""Spreadsheets through the API (issue 12 items 3, 5 and 8): imports by multipart upload, in
the request or as a job with progress, an error report and a cancel; exports as XLSX or CSV.
Invented data (the demo sites)."""

from __future__ import annotations

import csv
import io
import json

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile

from inventory import models
from inventory.imports import import_job_create, import_job_run
from inventory.selectors import site_document
from inventory.sheets import read_table
from tests.inventory.sheets.helpers import csv_bytes

URL = "/api/v1/imports/"
REGISTER = [
    ["Site", "CT", "Winding resistance (mΩ)"],
    ["QFN", "CB-132-A", 655],
    ["QFN", "CB-132-B", 656],
]


def _upload(client, rows, name="reg.csv", **fields):
    upload = SimpleUploadedFile(name, csv_bytes(rows), content_type="text/csv")
    return client.post(URL, {"file": upload, **fields}, format="multipart")


def test_a_small_register_is_imported_within_the_request(demo, editor):
    response = _upload(editor, REGISTER)
    assert response.status_code == 200, response.json()
    body = response.json()
    assert (body["kind"], body["created"], body["updated"], body["unchanged"]) == ("cts", 0, 2, 0)
    assert body["summary"] == (
        "2 CT row(s) over 1 site(s): 0 created, 2 updated, 0 unchanged (were written)"
    )
    ct = models.CurrentTransformer.objects.get(site__code="QFN", code="CB-132-A")
    assert ct.winding_ohm == pytest.approx(0.655, rel=1e-12)


def test_a_viewer_cannot_import(demo, viewer):
    assert _upload(viewer, REGISTER).status_code == 403


def test_bad_rows_come_back_in_the_apis_error_shape(demo, editor):
    response = _upload(editor, [["site", "ct", "phase"], ["QFN", "CB-131-A", "Q"]])
    assert response.status_code == 400
    assert response.json() == {
        "status": 400,
        "code": "invalid",
        "detail": "1 error(s) in the sheet; nothing was written",
        "errors": [
            {
                "row": 2,
                "column": "phase",
                "value": "Q",
                "message": "must be one of 'A', 'B', 'C', 'N', got 'Q'",
            }
        ],
    }


def test_a_site_file_goes_through_the_same_door(demo, editor):
    doc = site_document(models.Site.objects.get(code="QFN"))
    doc["site"]["name"] = "Quillfen renamed"
    upload = SimpleUploadedFile("qfn.json", json.dumps(doc).encode(), "application/json")
    response = editor.post(URL, {"file": upload}, format="multipart")
    assert response.status_code == 200, response.json()
    assert response.json()["updated"] == {"sites": 1}


def test_a_background_job_reports_progress_and_errors(
    demo, editor, django_capture_on_commit_callbacks
):
    with django_capture_on_commit_callbacks(execute=True):
        response = _upload(editor, REGISTER, background="1")
    assert response.status_code == 202
    job = response.json()
    assert response["Location"] == f"/api/v1/imports/{job['id']}/"
    body = editor.get(f"{URL}{job['id']}/").json()
    assert (body["status"], body["percent"], body["error_count"]) == ("done", 100, 0)
    assert body["result"]["updated"] == 2

    with django_capture_on_commit_callbacks(execute=True):
        bad = _upload(editor, [["site", "ct", "phase"], ["QFN", "CB-131-A", "Q"]], background="1")
    failed = editor.get(f"{URL}{bad.json()['id']}/").json()
    assert (failed["status"], failed["error_count"]) == ("failed", 1)
    report = editor.get(f"{URL}{bad.json()['id']}/errors.csv")
    assert report.status_code == 200
    assert list(csv.reader(io.StringIO(report.content.decode()))) == [
        ["row", "column", "value", "message"],
        ["2", "phase", "Q", "must be one of 'A', 'B', 'C', 'N', got 'Q'"],
    ]


@pytest.mark.django_db
def test_a_cancelled_job_writes_nothing(demo, django_capture_on_commit_callbacks):
    before = models.CurrentTransformer.history.count()
    with django_capture_on_commit_callbacks(execute=False):
        job = import_job_create(data=csv_bytes(REGISTER), filename="reg.csv")
    # The cancel arrives while the job runs: it stops at its next check and rolls back.
    models.ImportJob.objects.filter(pk=job.pk).update(cancel_requested=True)
    import_job_run(job_id=job.pk)
    job.refresh_from_db()
    assert (job.status, job.message) == ("cancelled", "cancelled; nothing was written")
    assert models.CurrentTransformer.history.count() == before
    assert bytes(job.data) == b""


def test_cancel_of_a_queued_job(demo, editor, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks(execute=False):
        job = import_job_create(data=csv_bytes(REGISTER), filename="reg.csv")
    response = editor.post(f"{URL}{job.pk}/cancel/")
    assert response.json()["status"] == "cancelled"
    import_job_run(job_id=job.pk)  # the task, if it still arrives, finds nothing to do
    assert models.ImportJob.objects.get(pk=job.pk).status == "cancelled"


@pytest.mark.parametrize(
    ("path", "first"),
    [
        ("cts", ["site", "equipment", "ct", "phase", "set", "secondary_a", "terminals"]),
        ("tap-changes", ["site", "ct", "from", "to", "changed_at", "work_order", "changed_by"]),
        ("findings", ["site", "code", "severity", "ct", "device", "input", "circuit"]),
    ],
)
def test_exports_as_csv_and_xlsx(demo, viewer, path, first):
    as_csv = viewer.get(f"/api/v1/exports/{path}/?format=csv&site=QFN")
    assert as_csv.status_code == 200
    assert as_csv["Content-Type"].startswith("text/csv")
    rows = list(csv.reader(io.StringIO(as_csv.content.decode())))
    assert rows[0][: len(first)] == first
    assert {r[0] for r in rows[1:]} == {"QFN"}
    as_xlsx = viewer.get(f"/api/v1/exports/{path}/?format=xlsx&site=QFN")
    assert as_xlsx.status_code == 200
    table = read_table(as_xlsx.content, name="x.xlsx")
    assert table.headers[: len(first)] == first
    assert len(table.rows) == len(rows) - 1


def test_export_of_an_unknown_site_or_format_is_a_400_in_json(demo, viewer):
    response = viewer.get("/api/v1/exports/cts/?format=csv&site=QFM")
    assert response.status_code == 400
    assert response.json()["errors"] == [
        {"field": "site", "message": "no site 'QFM' (did you mean QFN?)"}
    ]
    response = viewer.get("/api/v1/exports/cts/?format=pdf")
    assert response.status_code == 400
    assert response["Content-Type"] == "application/json"
    assert response.json()["errors"] == [
        {"field": "format", "message": "must be xlsx or csv, got 'pdf'"}
    ]
