"""Spreadsheets through the API: imports (a CT register, a tap-change log or a site file, as a
multipart upload) and exports (``?format=xlsx|csv``) of the CT register, the findings and the
tap-change log. Thin: the import is ``inventory.imports.run_import`` (the same import as the
command line); a large file becomes a background job (``ImportJob``) with progress, an error
report and a cancel."""

from __future__ import annotations

import csv
import io
import json
from typing import Any

from django.http import Http404, HttpResponse
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, OpenApiResponse, extend_schema
from rest_framework import exceptions, renderers, status
from rest_framework.parsers import FormParser, MultiPartParser
from rest_framework.request import Request
from rest_framework.response import Response
from rest_framework.views import APIView

from analysis.sheets import FINDING_HEADERS, finding_rows
from api.errors import CodeNotFound, FieldErrors, nearest
from api.roles import EDITOR
from inventory import models as inv
from inventory import selectors as records
from inventory.imports import ImportFailed, import_job_cancel, import_job_create, run_import
from inventory.sheets import MAX_BYTES
from inventory.sheets.writer import (
    CONTENT_TYPES,
    CT_HEADERS,
    TAP_CHANGE_HEADERS,
    ct_register_rows,
    tap_change_rows,
    write_table,
)

# Files up to this size are imported within the request; larger ones become a job.
SYNC_MAX_BYTES = 256 * 1024

_MULTIPART = {
    "multipart/form-data": {
        "type": "object",
        "properties": {
            "file": {"type": "string", "format": "binary"},
            "kind": {"type": "string", "enum": ["cts", "tap_changes", "site"]},
            "sheet": {"type": "string"},
            "dry_run": {"type": "boolean"},
            "mapping": {
                "type": "string",
                "description": 'JSON: {"their header": "column name" or null to ignore}',
            },
            "background": {"type": "boolean", "description": "run as a job whatever the size"},
        },
        "required": ["file"],
    }
}


class FileTooLarge(exceptions.APIException):
    status_code = status.HTTP_413_REQUEST_ENTITY_TOO_LARGE
    default_code = "too_large"
    default_detail = f"the file is over the {MAX_BYTES // 1024 // 1024} MB limit"


class SheetErrors(FieldErrors):
    """A 400 whose errors name the row, column, value and what is wrong."""

    def __init__(self, detail: str, errors: list[dict[str, Any]]) -> None:
        super().__init__(detail, [])
        self.errors = errors


def _truthy(value: Any) -> bool:
    return str(value or "").lower() in {"1", "true", "yes", "on"}


def job_json(job: inv.ImportJob) -> dict[str, Any]:
    return {
        "id": job.pk,
        "status": job.status,
        "percent": job.percent,
        "kind": job.kind or None,
        "filename": job.filename,
        "dry_run": job.dry_run,
        "result": job.result or None,
        "message": job.message,
        "error_count": len(job.errors or []),
        "errors_url": f"/api/v1/imports/{job.pk}/errors.csv",
        "cancel_requested": job.cancel_requested,
        "created_at": job.created_at.isoformat().replace("+00:00", "Z"),
        "finished_at": (
            job.finished_at.isoformat().replace("+00:00", "Z") if job.finished_at else None
        ),
    }


class ImportCreate(APIView):
    """Import a CT register or tap-change log (XLSX or CSV) or a site file (JSON or YAML):
    atomic, upsert by natural key, tap changes recorded as events. A file up to 256 KB is
    imported within the request (200 with the summary, or 400 with every error by row, column
    and value); a larger one (or ``background``) becomes a job (202, poll its URL)."""

    parser_classes = [MultiPartParser, FormParser]
    required_role = EDITOR

    @extend_schema(
        request=_MULTIPART,
        responses={
            200: OpenApiTypes.OBJECT,
            202: OpenApiTypes.OBJECT,
            400: OpenApiResponse(description="every error; nothing written"),
            413: OpenApiResponse(description="file over the size limit"),
        },
    )
    def post(self, request: Request) -> Response:
        upload = request.FILES.get("file")
        if upload is None:
            raise FieldErrors("send the file as the multipart field 'file'", [("file", "required")])
        if upload.size is not None and upload.size > MAX_BYTES:
            raise FileTooLarge()
        kind = request.data.get("kind") or None
        if kind not in (None, "cts", "tap_changes", "site"):
            raise FieldErrors(
                "unknown kind", [("kind", f"must be cts, tap_changes or site, got {kind!r}")]
            )
        mapping = None
        if request.data.get("mapping"):
            try:
                mapping = json.loads(request.data["mapping"])
            except ValueError:
                mapping = None
            if not isinstance(mapping, dict):
                raise FieldErrors(
                    "bad mapping", [("mapping", 'a JSON object {"header": "column" or null}')]
                )
        data = upload.read()
        options = {
            "data": data,
            "filename": upload.name or "upload",
            "kind": kind,
            "mapping": mapping,
            "dry_run": _truthy(request.data.get("dry_run")),
            "user": request.user,
        }
        sheet = request.data.get("sheet") or ""
        if len(data) > SYNC_MAX_BYTES or _truthy(request.data.get("background")):
            job = import_job_create(sheet=sheet, **options)
            job.refresh_from_db()  # in-process (no broker), it has run by now
            response = Response(job_json(job), status=status.HTTP_202_ACCEPTED)
            response["Location"] = f"/api/v1/imports/{job.pk}/"
            return response
        try:
            result = run_import(sheet=sheet or None, **options)
        except ImportFailed as exc:
            raise SheetErrors(str(exc), exc.errors) from exc
        return Response(result)


def _job(pk: str) -> inv.ImportJob:
    job = (
        inv.ImportJob.objects.filter(pk=int(pk)).first() if pk.isdigit() and len(pk) < 18 else None
    )
    if job is None:
        raise CodeNotFound("import", str(pk), [])
    return job


class ImportDetail(APIView):
    """An import job: status, percent done, the summary when done, the error count."""

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request: Request, pk: str) -> Response:
        return Response(job_json(_job(pk)))


class ImportErrors(APIView):
    """Every error of an import job as CSV: row, column, value, message."""

    @extend_schema(responses={(200, "text/csv"): OpenApiTypes.BINARY})
    def get(self, request: Request, pk: str) -> HttpResponse:
        job = _job(pk)
        out = io.StringIO()
        writer = csv.writer(out, lineterminator="\r\n")
        writer.writerow(["row", "column", "value", "message"])
        for error in job.errors or []:
            writer.writerow(
                [
                    "" if error.get(k) is None else error.get(k)
                    for k in ("row", "column", "value", "message")
                ]
            )
        response = HttpResponse(out.getvalue().encode(), content_type=CONTENT_TYPES["csv"])
        response["Content-Disposition"] = f'attachment; filename="import-{job.pk}-errors.csv"'
        return response


class ImportCancel(APIView):
    """Cancel an import job: nothing it did is written."""

    required_role = EDITOR

    @extend_schema(request=None, responses=OpenApiTypes.OBJECT)
    def post(self, request: Request, pk: str) -> Response:
        return Response(job_json(import_job_cancel(job=_job(pk))))


class _SheetRenderer(renderers.BaseRenderer):
    """Passes a file through; an error body (a dict) goes out as JSON."""

    charset = None

    def render(self, data: Any, accepted_media_type: Any = None, renderer_context: Any = None):
        if isinstance(data, bytes):
            return data
        if renderer_context and renderer_context.get("response") is not None:
            renderer_context["response"]["Content-Type"] = "application/json"
        return json.dumps(data).encode()


class XlsxRenderer(_SheetRenderer):
    media_type = CONTENT_TYPES["xlsx"]
    format = "xlsx"


class CsvRenderer(_SheetRenderer):
    media_type = "text/csv"
    format = "csv"


_FORMAT = OpenApiParameter("format", str, enum=["xlsx", "csv"], description="default xlsx")
_SITE = OpenApiParameter("site", str, description="one site (default: every site)")


class _Export(APIView):
    renderer_classes = [XlsxRenderer, CsvRenderer]
    title = ""
    columns: list[str] = []

    def rows(self, site: str | None) -> Any:
        raise NotImplementedError

    def perform_content_negotiation(self, request: Request, force: bool = False) -> Any:
        try:
            return super().perform_content_negotiation(request, force)
        except Http404:  # DRF's answer to an unknown ?format=
            raise FieldErrors(
                "unknown format",
                [("format", f"must be xlsx or csv, got {request.query_params.get('format')!r}")],
            ) from None

    def get(self, request: Request) -> Response:
        fmt = request.accepted_renderer.format
        site = request.query_params.get("site") or None
        if site is not None and not inv.Site.objects.filter(code=site).exists():
            near = nearest(site, records.codes(inv.Site))
            hint = f" (did you mean {', '.join(near)}?)" if near else ""
            raise FieldErrors("unknown site", [("site", f"no site {site!r}{hint}")])
        data = write_table(self.columns, self.rows(site), fmt=fmt, sheet=self.title)
        name = f"{self.title.lower().replace(' ', '-')}{'-' + site if site else ''}.{fmt}"
        response = Response(data, content_type=CONTENT_TYPES[fmt])
        response["Content-Disposition"] = f'attachment; filename="{name}"'
        return response


class CTRegisterExport(_Export):
    """The CT register: the columns the import reads, so export → import changes nothing."""

    title = "CT register"
    columns = CT_HEADERS

    @extend_schema(parameters=[_FORMAT, _SITE], responses=OpenApiTypes.BINARY)
    def get(self, request: Request) -> Response:
        return super().get(request)

    def rows(self, site: str | None) -> Any:
        return ct_register_rows(site=site)


class FindingsExport(_Export):
    """The stored findings with their numbers (JSON) and whether each is stale."""

    title = "Findings"
    columns = FINDING_HEADERS

    @extend_schema(parameters=[_FORMAT, _SITE], responses=OpenApiTypes.BINARY)
    def get(self, request: Request) -> Response:
        return super().get(request)

    def rows(self, site: str | None) -> Any:
        return finding_rows(site=site)


class TapChangesExport(_Export):
    """The tap-change log: one row per recorded change (the columns the import reads)."""

    title = "Tap changes"
    columns = TAP_CHANGE_HEADERS

    @extend_schema(parameters=[_FORMAT, _SITE], responses=OpenApiTypes.BINARY)
    def get(self, request: Request) -> Response:
        return super().get(request)

    def rows(self, site: str | None) -> Any:
        return tap_change_rows(site=site)
