"""Home (every site with its counts, and the code search) and the site page."""

from __future__ import annotations

from typing import Any
from urllib.parse import urlencode

from django.db.models import Q
from django.http import HttpRequest, HttpResponse
from django.shortcuts import redirect, render
from django.urls import reverse

from analysis import selectors
from analysis.engine.findings import SEVERITY_ORDER
from inventory import models as inv
from inventory import selectors as records
from pages import selectors as page_selectors
from pages.access import viewer_required
from pages.views.common import get_site, hx_target, paginate

_HIT_URLS = {
    "site": lambda h: reverse("pages:site", args=[h.code]),
    "ct": lambda h: reverse("pages:ct", args=[h.site, h.code]),
    "device": lambda h: reverse("pages:device", args=[h.site, h.code]),
    "procedure": lambda h: reverse("pages:procedure", args=[h.site, h.code]),
}


# Codes without a page of their own open the site at the list that shows them.
_HIT_ANCHORS = {"bus": "buses", "equipment": "cts", "switch": "procedures"}


def _hit_url(hit: page_selectors.Hit) -> str:
    url = _HIT_URLS.get(hit.kind)
    if url is not None:
        return url(hit)
    return reverse("pages:site", args=[hit.site]) + f"#{_HIT_ANCHORS[hit.kind]}"


def _stale(row: Any) -> bool:
    return row.computed_revision is None or row.computed_revision < row.revision


@viewer_required
def home(request: HttpRequest) -> HttpResponse:
    """Every site with its counts and whether its results are current; the search box."""
    query = request.GET.get("q", "").strip()
    hits = page_selectors.code_search(query) if query else []
    exact = [h for h in hits if h.code.casefold() == query.casefold()]
    if len(exact) == 1:
        return redirect(_hit_url(exact[0]))
    page = paginate(request, selectors.sites_overview(), "page")
    ids = [row.pk for row in page]
    by_severity = selectors.findings_by_severity(ids)
    circuits = selectors.circuit_counts(ids)
    rows = [
        {
            "site": row,
            "circuits": circuits.get(row.pk),
            "findings": by_severity[row.pk],
            "stale": _stale(row),
        }
        for row in page
    ]
    return render(
        request,
        "pages/home.html",
        {
            "page": page,
            "rows": rows,
            "severities": SEVERITY_ORDER,
            "query": query,
            "hits": [(h, _hit_url(h)) for h in hits],
        },
    )


def _findings_context(request: HttpRequest, site: inv.Site) -> dict[str, Any]:
    """The site's findings with the filters of the form (severity or worse, code, about)."""
    severity = request.GET.get("severity", "")
    if severity not in SEVERITY_ORDER:
        severity = ""
    code = request.GET.get("code", "").strip()
    about = request.GET.get("about", "").strip()
    qs = selectors.findings_queryset(site=site.code, severity=severity or None, or_worse=True)
    if code:
        qs = qs.filter(code=code)
    if about:
        qs = qs.filter(
            Q(ct__icontains=about) | Q(device__icontains=about) | Q(procedure__icontains=about)
        )
    return {
        "findings": paginate(request, qs, "fpage"),
        "filters": {"severity": severity, "code": code, "about": about},
        "findings_keep": "&" + urlencode({"severity": severity, "code": code, "about": about}),
        "severities": SEVERITY_ORDER,
        "finding_codes": sorted(
            set(
                selectors.findings_queryset(site=site.code)
                .order_by()
                .values_list("code", flat=True)
                .distinct()
            )
        ),
    }


@viewer_required
def site_page(request: HttpRequest, site: str) -> HttpResponse:
    """A site: buses and fault levels, CTs, circuits, devices, procedures with their stored
    verdict, findings with filters. Each list has its own page number."""
    obj = get_site(site)
    if hx_target(request) == "findings":
        context = {"site": obj, **_findings_context(request, obj)}
        return render(request, "pages/_findings.html", context)
    overview = selectors.sites_overview().filter(pk=obj.pk).first()
    procedures = paginate(
        request, records.procedures_queryset(site_id=obj.pk).order_by("code"), "ppage"
    )
    verdicts = selectors.procedure_verdict_rows(site_id=obj.pk)
    context = {
        "site": obj,
        "overview": overview,
        "stale": _stale(overview),
        "buses": inv.Bus.objects.filter(site=obj).order_by("code"),
        "cts": paginate(request, records.cts_queryset(site_id=obj.pk).order_by("code"), "cpage"),
        "circuits": paginate(request, selectors.site_circuits(site_id=obj.pk), "kpage"),
        "devices": paginate(
            request, records.devices_queryset(site_id=obj.pk).order_by("code"), "dpage"
        ),
        "procedures": procedures,
        "procedure_rows": [(p, verdicts.get(p.code)) for p in procedures],
        **_findings_context(request, obj),
    }
    return render(request, "pages/site.html", context)
