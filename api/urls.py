"""API routes, versioned under /api/v1/. The OpenAPI schema is at /api/v1/schema/ and its
documentation pages (served from the installed package, no CDN) at /api/v1/docs/."""

import os
from typing import Any

from django.urls import URLPattern, path
from drf_spectacular.views import SpectacularAPIView, SpectacularSwaggerView

from api import views, views_sheets
from api import views_record as record

site = "sites/<str:site>/"


def _record(
    plural: str, key: str, listing: Any, detail: Any, name: str, converter: str = "str"
) -> list[URLPattern]:
    """A record resource: its list (GET, POST) and its detail (GET, PATCH, DELETE)."""
    return [
        path(f"{site}{plural}/", listing.as_view(), name=f"{name}-list"),
        path(f"{site}{plural}/<{converter}:{key}>/", detail.as_view(), name=f"{name}-detail"),
    ]


urlpatterns = [
    path("schema/", SpectacularAPIView.as_view(), name="schema"),
    path("docs/", SpectacularSwaggerView.as_view(url_name="schema"), name="docs"),
    path("sites/", record.SiteList.as_view(), name="site-list"),
    path("sites/import/", views.SiteImport.as_view(), name="site-import"),
    path(site, record.SiteDetail.as_view(), name="site-detail"),
    path(f"{site}export/", views.SiteExport.as_view(), name="site-export"),
    path(f"{site}check/", views.DraftCheck.as_view(), name="site-check"),
    *_record("buses", "code", record.BusList, record.BusDetail, "bus"),
    *_record("equipment", "code", record.EquipmentList, record.EquipmentDetail, "equipment"),
    *_record(
        "terminal-blocks",
        "code",
        record.TerminalBlockList,
        record.TerminalBlockDetail,
        "terminal-block",
    ),
    *_record("cts", "code", record.CTList, record.CTDetail, "ct"),
    path(f"{site}cts/<str:code>/report/", views.CTReport.as_view(), name="ct-report"),
    path(
        f"{site}cts/<str:code>/report/<str:name>.<str:fmt>",
        views.CTPlot.as_view(),
        name="ct-plot",
    ),
    path(f"{site}cts/<str:code>/circuits/", views.CTCircuits.as_view(), name="ct-circuits"),
    path(f"{site}cts/<str:code>/tap-change/", views.CTTapChange.as_view(), name="ct-tap-change"),
    path(f"{site}cts/<str:code>/what-if/", views.CTWhatIf.as_view(), name="ct-what-if"),
    path(f"{site}circuits/", views.CircuitList.as_view(), name="circuit-list"),
    path(f"{site}circuits/<str:key>/", views.CircuitDetail.as_view(), name="circuit-detail"),
    *_record("devices", "code", record.DeviceList, record.DeviceDetail, "device"),
    path(f"{site}devices/<str:code>/cts/", views.DeviceCTs.as_view(), name="device-cts"),
    path(
        f"{site}devices/<str:code>/isolation-plan/",
        views.IsolationPlan.as_view(),
        name="device-plan",
    ),
    *_record("wires", "id", record.WireList, record.WireDetail, "wire"),
    *_record("links", "id", record.LinkList, record.LinkDetail, "link"),
    *_record("grounds", "id", record.GroundList, record.GroundDetail, "ground"),
    # a switch code is GROUP/POLE
    *_record("switches", "code", record.SwitchList, record.SwitchDetail, "switch", "path"),
    *_record("procedures", "code", record.ProcedureList, record.ProcedureDetail, "procedure"),
    path(
        f"{site}procedures/<str:code>/check/",
        views.ProcedureCheck.as_view(),
        name="procedure-check",
    ),
    path("findings/", views.FindingList.as_view(), name="finding-list"),
    path("tap-changes/", views.TapChangeList.as_view(), name="tap-change-list"),
    # spreadsheets (api/views_sheets.py)
    path("imports/", views_sheets.ImportCreate.as_view(), name="import-create"),
    path("imports/<str:pk>/", views_sheets.ImportDetail.as_view(), name="import-detail"),
    path("imports/<str:pk>/errors.csv", views_sheets.ImportErrors.as_view(), name="import-errors"),
    path("imports/<str:pk>/cancel/", views_sheets.ImportCancel.as_view(), name="import-cancel"),
    path("exports/cts/", views_sheets.CTRegisterExport.as_view(), name="export-cts"),
    path("exports/findings/", views_sheets.FindingsExport.as_view(), name="export-findings"),
    path("exports/tap-changes/", views_sheets.TapChangesExport.as_view(), name="export-taps"),
]

if os.environ.get("LOOPKEEP_BENCH_FLOOR") == "1":  # the benchmark's floor (api/bench.py)
    from api.bench import FloorList

    urlpatterns.append(path("bench-floor/", FloorList.as_view(), name="bench-floor"))
