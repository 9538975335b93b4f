"""API routes, versioned under /api/v1/. The OpenAPI schema is at /api/v1/schema/ and its
documentation pages (served from the installed package, no CDN) at /api/v1/docs/."""

import os

from django.urls import path
from drf_spectacular.views import SpectacularAPIView, SpectacularSwaggerView

from api import views

site = "sites/<str:site>/"

urlpatterns = [
    path("schema/", SpectacularAPIView.as_view(), name="schema"),
    path("docs/", SpectacularSwaggerView.as_view(url_name="schema"), name="docs"),
    path("sites/", views.SiteList.as_view(), name="site-list"),
    path("sites/import/", views.SiteImport.as_view(), name="site-import"),
    path(site, views.SiteDetail.as_view(), name="site-detail"),
    path(f"{site}export/", views.SiteExport.as_view(), name="site-export"),
    path(f"{site}check/", views.DraftCheck.as_view(), name="site-check"),
    path(f"{site}cts/", views.CTList.as_view(), name="ct-list"),
    path(f"{site}cts/<str:code>/", views.CTDetail.as_view(), name="ct-detail"),
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
    path(f"{site}devices/", views.DeviceList.as_view(), name="device-list"),
    path(f"{site}devices/<str:code>/", views.DeviceDetail.as_view(), name="device-detail"),
    path(f"{site}devices/<str:code>/cts/", views.DeviceCTs.as_view(), name="device-cts"),
    path(
        f"{site}devices/<str:code>/isolation-plan/",
        views.IsolationPlan.as_view(),
        name="device-plan",
    ),
    path(f"{site}procedures/", views.ProcedureList.as_view(), name="procedure-list"),
    path(f"{site}procedures/<str:code>/", views.ProcedureDetail.as_view(), name="procedure-detail"),
    path(
        f"{site}procedures/<str:code>/check/",
        views.ProcedureCheck.as_view(),
        name="procedure-check",
    ),
    path("findings/", views.FindingList.as_view(), name="finding-list"),
    path("tap-changes/", views.TapChangeList.as_view(), name="tap-change-list"),
]

if os.environ.get("LOOPKEEP_BENCH_FLOOR") == "1":  # the benchmark's floor (api/bench.py)
    from api.bench import FloorList

    urlpatterns.append(path("bench-floor/", FloorList.as_view(), name="bench-floor"))
