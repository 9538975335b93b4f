"""The CT page (nameplate, taps, tap history, the stored report with its plots, the devices
and circuits it shares, its findings) and its plot images."""

from __future__ import annotations

from typing import Any

from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import render

from analysis import selectors
from analysis.compute import ct_plots
from inventory import models as inv
from inventory import selectors as records
from pages.access import viewer_required
from pages.views.common import get_site, site_input
from trade.ratio import format_ratio

PLOTS = ("excitation", "burden")


def _ratio(positions: dict[str, float], tap: list[str], secondary_a: float) -> str | None:
    if len(tap) != 2 or tap[0] not in positions or tap[1] not in positions:
        return None
    return format_ratio(abs(positions[tap[0]] - positions[tap[1]]), secondary_a)


@viewer_required
def ct_page(request: HttpRequest, site: str, code: str) -> HttpResponse:
    obj = get_site(site)
    ct = records.cts_queryset(site_id=obj.pk).filter(code=code).first()
    if ct is None:
        raise Http404(f"no CT {code!r} at {site}")
    terminals = list(ct.ct_terminals.all())
    positions = {t.name: t.position_a for t in terminals}
    in_use = [t.name for r in ("first", "second") for t in terminals if t.tap_role == r]
    history: list[dict[str, Any]] = [
        {
            "change": change,
            "from_ratio": _ratio(positions, change.from_tap, ct.secondary_a),
            "to_ratio": _ratio(positions, change.to_tap, ct.secondary_a),
        }
        for change in inv.TapChange.objects.filter(ct=ct).order_by("changed_at", "id")
    ]
    row = selectors.ct_report_row(site_id=obj.pk, ct=code)
    circuits: dict[str, dict[str, list[str]]] = {}
    for m in selectors.circuits_sharing_ct(site_id=obj.pk, ct=code):
        entry = circuits.setdefault(m.circuit_key, {"cts": [], "devices": []})
        entry["cts" if m.kind == "ct" else "devices"].append(m.code)
    devices = sorted({d for c in circuits.values() for d in c["devices"]})
    context = {
        "site": obj,
        "ct": ct,
        "terminals": terminals,
        "in_use": in_use,
        "ratio": None
        if ct.tap_primary_a is None
        else format_ratio(ct.tap_primary_a, ct.secondary_a),
        "history": history,
        "report_row": row,
        "report": None if row is None else row.report,
        "circuits": circuits,
        "devices": devices,
        "findings": selectors.findings_queryset(site=obj.code).filter(ct=code),
        "plots": PLOTS if ct.excitation else PLOTS[1:],
    }
    return render(request, "pages/ct.html", context)


@viewer_required
def ct_plot(request: HttpRequest, site: str, code: str, name: str) -> HttpResponse:
    """A CT's excitation or burden plot as SVG, drawn from the record now (the same function
    as the API's plot endpoint)."""
    obj = get_site(site)
    if name not in PLOTS:
        raise Http404(f"no plot {name!r}")
    doc, _ = site_input(obj)
    try:
        images = ct_plots(doc, code, "svg")
    except KeyError as exc:
        raise Http404(str(exc)) from exc
    if name not in images:
        raise Http404(f"CT {code} has no {name} plot")
    return HttpResponse(images[name], content_type="image/svg+xml")
