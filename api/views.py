"""The API's views: thin. Reads go through the selectors of ``inventory`` and ``analysis``,
answers computed now through ``analysis.actions`` (the same functions as the command line),
writes through the services of ``inventory``."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from django.core.exceptions import ValidationError as DjangoValidationError
from django.db import transaction
from django.http import HttpResponse
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema
from rest_framework import generics
from rest_framework.request import Request
from rest_framework.response import Response
from rest_framework.views import APIView

from analysis import actions, selectors
from analysis.compute import ct_plots
from analysis.engine import ProcedureError
from api import filters, serializers
from api.errors import CodeNotFound, FieldErrors
from api.pagination import ResultPagination
from api.parsers import SiteFileJSONParser, SiteFileYAMLParser
from inventory import models as inv
from inventory import selectors as records
from inventory.services import SiteImportError, ct_change_tap, site_import

# ---------------------------------------------------------------------------------------------
# helpers


def _site(code: str) -> inv.Site:
    site = inv.Site.objects.filter(code=code).first()
    if site is None:
        raise CodeNotFound("site", code, records.codes(inv.Site))
    return site


def _coded(model: type[Any], site: inv.Site, code: str, what: str) -> Any:
    obj = model.objects.filter(site=site, code=code).first()
    if obj is None:
        raise CodeNotFound(what, code, records.codes(model, site_id=site.pk), site.code)
    return obj


def _document(site: inv.Site) -> dict[str, Any]:
    return records.site_document(site)


def _shared_document(site: inv.Site) -> Callable[[], dict[str, Any]]:
    """A loader of the site document at the site's revision, through the shared cache."""
    return lambda: actions.site_document_at(site.record_version, lambda: _document(site))


def _site_input(site: inv.Site) -> tuple[dict[str, Any], Any]:
    """The site document and netlist at the site's current revision (kept per thread)."""
    return actions.site_netlist(site.record_version, _shared_document(site))


def _printable_code(text: str) -> bool:
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return False
    return text.isprintable()


class SiteScoped:
    """Views under ``/sites/{site}/``: the site is looked up once, with "did you mean"."""

    kwargs: dict[str, Any]

    def initial(self, request: Request, *args: Any, **kwargs: Any) -> None:
        super().initial(request, *args, **kwargs)  # type: ignore[misc]
        # A code is printable text: a NUL (which PostgreSQL refuses in any string) or a lone
        # surrogate in the path is a bad request, never a query.
        bad = [k for k, v in kwargs.items() if isinstance(v, str) and not _printable_code(v)]
        if bad:
            raise FieldErrors(
                "the path holds a character no code may hold",
                [(k, "NUL, control characters and lone surrogates are not allowed") for k in bad],
            )

    @property
    def site(self) -> inv.Site:
        if not hasattr(self, "_site_obj"):
            self._site_obj = _site(self.kwargs["site"])
        return self._site_obj


# ---------------------------------------------------------------------------------------------
# sites


class SiteExport(SiteScoped, APIView):
    """The site file (``loopkeep.site/1``) of a stored site."""

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request: Request, site: str) -> Response:
        return Response(_document(self.site))


class SiteImport(APIView):
    """Validate a site file and upsert its site atomically (``?dry_run=1``: say what would
    change, write nothing). Every error names its JSON pointer; nothing is written on any.
    The body is read by the site-file loader (JSON, or YAML as ``application/yaml``)."""

    parser_classes = [SiteFileJSONParser, SiteFileYAMLParser]

    @extend_schema(
        request=OpenApiTypes.OBJECT,
        responses=OpenApiTypes.OBJECT,
        parameters=[OpenApiParameter("dry_run", bool, description="validate and count only")],
    )
    def post(self, request: Request) -> Response:
        dry_run = request.query_params.get("dry_run", "").lower() in {"1", "true", "yes"}
        if not isinstance(request.data, dict):
            raise FieldErrors("a site file is a JSON object", [("", "expected an object")])
        try:
            result = site_import(doc=dict(request.data), dry_run=dry_run, user=request.user)
        except SiteImportError as exc:
            pairs = [tuple(e.split(": ", 1)) if ": " in e else ("", e) for e in exc.errors]
            raise FieldErrors(
                f"{len(pairs)} error(s) in the site file; nothing was written",
                [(p, m) for p, m in pairs],
                key="pointer",
            ) from exc
        return Response(
            {
                "site": result.site,
                "dry_run": result.dry_run,
                "created": dict(result.created),
                "updated": dict(result.updated),
                "deleted": dict(result.deleted),
                "tap_changes": list(result.tap_changes),
                "summary": result.summary(),
            }
        )


# ---------------------------------------------------------------------------------------------
# the record


def etag(site: inv.Site) -> str:
    """The version of a site's record a client read: any write to the site bumps it."""
    return f'"{site.pk}-{site.revision}"'


class TapChangeList(generics.ListAPIView):
    """Ratio tap changes across sites: who, when, from, to, ratios and reason."""

    serializer_class = serializers.TapChangeSerializer
    filterset_class = filters.TapChangeFilter
    queryset = records.tap_changes_queryset()
    pagination_class = type(
        "TapChangePagination", (ResultPagination,), {"ordering": ("changed_at", "id")}
    )


# ---------------------------------------------------------------------------------------------
# stored results


class FindingList(generics.ListAPIView):
    """Findings of every site (design.md's findings JSON), each with ``stale``."""

    serializer_class = serializers.FindingSerializer  # the documented shape
    filterset_class = filters.FindingFilter
    queryset = selectors.findings_for_api()
    pagination_class = ResultPagination

    def list(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        # The hottest list of the API: rows go out through the selectors' findings JSON (the
        # same function as ``findings --json``), a plain dict per row, not a DRF field walk.
        page = self.paginate_queryset(self.filter_queryset(self.get_queryset()))
        assert page is not None  # the list is always paginated (ResultPagination)
        return self.get_paginated_response([selectors.finding_json(row) for row in page])


class CTReport(SiteScoped, APIView):
    """The stored CT report (design.md's CT report JSON) with ``computed_at``, the
    ``revision`` it was computed from and ``stale``."""

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request: Request, site: str, code: str) -> Response:
        row = selectors.ct_report_row(site_id=self.site.pk, ct=code)
        if row is None:
            _coded(inv.CurrentTransformer, self.site, code, "CT")
            raise CodeNotFound("report of CT", code, [], f"{site} (not computed yet)")
        return Response(
            {
                **row.report,
                "computed_at": serializers.utc_stamp(row.computed_at),
                "revision": row.revision,
                "stale": bool(row.stale),
            }
        )


class CTPlot(SiteScoped, APIView):
    """The excitation curve or the burden plot of a CT, as PNG or SVG, from the record now."""

    @extend_schema(responses={(200, "image/png"): OpenApiTypes.BINARY})
    def get(self, request: Request, site: str, code: str, name: str, fmt: str) -> HttpResponse:
        if name not in {"excitation", "burden"} or fmt not in {"png", "svg"}:
            raise CodeNotFound("plot", f"{name}.{fmt}", ["excitation.png", "burden.svg"])
        _coded(inv.CurrentTransformer, self.site, code, "CT")
        images = ct_plots(_document(self.site), code, fmt)
        if name not in images:
            raise CodeNotFound("plot", f"{name}.{fmt}", [f"{n}.{fmt}" for n in images], site)
        content_type = "image/png" if fmt == "png" else "image/svg+xml"
        return HttpResponse(images[name], content_type=content_type)


class CTCircuits(SiteScoped, APIView):
    """Which circuits, CTs and devices share this CT (from the stored circuits)."""

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request: Request, site: str, code: str) -> Response:
        members = list(selectors.circuits_sharing_ct(site_id=self.site.pk, ct=code))
        if not members:
            _coded(inv.CurrentTransformer, self.site, code, "CT")
        circuits: dict[str, dict[str, list[str]]] = {}
        for m in members:
            entry = circuits.setdefault(m.circuit_key, {"cts": [], "devices": []})
            entry["cts" if m.kind == "ct" else "devices"].append(m.code)
        return Response(
            {
                "site": site,
                "ct": code,
                "circuits": [{"key": k, **v} for k, v in circuits.items()],
            }
        )


class CircuitList(SiteScoped, APIView):
    """A site's secondary circuits (from the stored results): key, CTs, devices, ground
    points, ``computed_at`` and ``stale``."""

    @extend_schema(responses=OpenApiTypes.OBJECT, operation_id="sites_circuits_list")
    def get(self, request: Request, site: str) -> Response:
        return Response({"site": site, "circuits": selectors.site_circuits(site_id=self.site.pk)})


class CircuitDetail(SiteScoped, APIView):
    """One secondary circuit with its members."""

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request: Request, site: str, key: str) -> Response:
        found = selectors.site_circuits(site_id=self.site.pk, key=key)
        if not found:
            known = [c["key"] for c in selectors.site_circuits(site_id=self.site.pk)]
            raise CodeNotFound("circuit", key, known, site)
        return Response({"site": site, **found[0]})


class DeviceCTs(SiteScoped, APIView):
    """Which CTs feed this device (from the stored circuits)."""

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request: Request, site: str, code: str) -> Response:
        members = list(selectors.cts_feeding_device(site_id=self.site.pk, device=code))
        if not members:
            _coded(inv.Device, self.site, code, "device")
        return Response(
            {
                "site": site,
                "device": code,
                "cts": sorted({m.code for m in members}),
                "circuits": sorted({m.circuit_key for m in members}),
            }
        )


# ---------------------------------------------------------------------------------------------
# answers computed now (they store nothing: a viewer may ask)


class ProcedureCheck(SiteScoped, APIView):
    """Check a stored procedure now, every transition included (the verdict JSON, exactly as
    ``check_procedure --json``), with the safety cautions."""

    stores_nothing = True

    @extend_schema(request=None, responses=OpenApiTypes.OBJECT)
    def post(self, request: Request, site: str, code: str) -> Response:
        _coded(inv.Procedure, self.site, code, "procedure")
        site_obj = self.site
        try:
            verdict = actions.procedure_check_at(
                site_obj.record_version, code, _shared_document(site_obj)
            )
            return Response(verdict)
        except ProcedureError as exc:
            raise FieldErrors("the procedure cannot be checked", [("steps", str(exc))]) from exc


class DraftCheck(SiteScoped, APIView):
    """Check operations that are not stored (body: ``steps``, optional ``devices``)."""

    stores_nothing = True

    @extend_schema(request=serializers.DraftCheckSerializer, responses=OpenApiTypes.OBJECT)
    def post(self, request: Request, site: str) -> Response:
        body = serializers.DraftCheckSerializer(data=request.data)
        body.is_valid(raise_exception=True)
        try:
            doc, netlist = _site_input(self.site)
            verdict = actions.draft_check(
                doc,
                body.validated_data["steps"],
                body.validated_data["devices"],
                netlist=netlist,
            )
        except ProcedureError as exc:
            raise FieldErrors("the steps cannot be checked", [("steps", str(exc))]) from exc
        return Response(verdict)


class IsolationPlan(SiteScoped, APIView):
    """The shortest safe isolation and restoration of a device (the plan JSON, exactly as
    ``plan_isolation --json``), with the safety cautions."""

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request: Request, site: str, code: str) -> Response:
        _coded(inv.Device, self.site, code, "device")
        doc, netlist = _site_input(self.site)
        return Response(actions.isolation_plan(doc, code, netlist=netlist))


# ---------------------------------------------------------------------------------------------
# writes and what-ifs around one CT


class CTTapChange(SiteScoped, APIView):
    """Change the terminals in use of a CT: the event is recorded (who, when, why), the
    recompute is requested, and the answer gives the new ratio and every device fed by the CT
    whose ratio setting no longer matches it."""

    @extend_schema(request=serializers.TapChangeBodySerializer, responses=OpenApiTypes.OBJECT)
    def post(self, request: Request, site: str, code: str) -> Response:
        ct = _coded(inv.CurrentTransformer, self.site, code, "CT")
        body = serializers.TapChangeBodySerializer(data=request.data)
        body.is_valid(raise_exception=True)
        data = body.validated_data
        reason = " ".join(x for x in (data["work_order"], data["reason"]) if x)
        try:
            with transaction.atomic():
                change = ct_change_tap(
                    ct=ct,
                    to=tuple(data["in_use"]),
                    by=request.user.get_username(),
                    reason=reason,
                    at=data["changed_at"],
                    move_leads=data["move_leads"],
                )
        except DjangoValidationError as exc:
            raise FieldErrors(
                "the tap change was refused; nothing was written",
                [(k, m) for k, msgs in exc.message_dict.items() for m in msgs],
            ) from exc
        report = actions.ct_report_now(_document(self.site), code)
        mismatched = sorted(
            {f["device"] for f in report["findings"] if f["code"] == "ratio_setting_mismatch"}
        )
        response = Response(
            {
                "site": site,
                "ct": code,
                "from": change.from_tap,
                "to": change.to_tap,
                "ratio": report["ratio"],
                "changed_at": serializers.utc_stamp(change.changed_at),
                "changed_by": change.changed_by,
                "reason": change.reason,
                "ratio_setting_mismatch": mismatched,
            }
        )
        response["ETag"] = etag(inv.Site.objects.get(pk=self.site.pk))
        return response


class CTWhatIf(SiteScoped, APIView):
    """The CT report as it would be with another tap, other leads or other burdens; nothing
    is stored."""

    stores_nothing = True

    @extend_schema(request=serializers.WhatIfSerializer, responses=OpenApiTypes.OBJECT)
    def post(self, request: Request, site: str, code: str) -> Response:
        _coded(inv.CurrentTransformer, self.site, code, "CT")
        body = serializers.WhatIfSerializer(data=request.data)
        body.is_valid(raise_exception=True)
        try:
            return Response(actions.what_if(_document(self.site), code, body.validated_data))
        except actions.WhatIfError as exc:
            raise FieldErrors("the change does not apply to the record", exc.errors) from exc
