"""Work sheets (PDF) from a verified isolation plan or a safe, fresh stored procedure. A stale
or unsafe one prints no sheet: the page says why not (``analysis.worksheet`` decides)."""

from __future__ import annotations

import re

from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import render

from analysis import actions, selectors
from analysis.worksheet import WorksheetRefused, worksheet_for_plan, worksheet_for_procedure
from inventory import models as inv
from inventory import selectors as records
from pages.access import viewer_required
from pages.views import drawing
from pages.views.common import get_site, site_input


def _pdf(content: bytes, name: str) -> HttpResponse:
    safe = re.sub(r"[^A-Za-z0-9._-]", "_", name)
    return HttpResponse(
        content,
        content_type="application/pdf",
        headers={"Content-Disposition": f'inline; filename="{safe}.pdf"'},
    )


def _refused(request: HttpRequest, site: inv.Site, subject: str, reason: str) -> HttpResponse:
    return render(
        request,
        "pages/worksheet_refused.html",
        {"site": site, "subject": subject, "reason": reason},
        status=409,
    )


@viewer_required
def device_worksheet(request: HttpRequest, site: str, code: str) -> HttpResponse:
    """The work sheet of the device's isolation plan, planned now against the current record."""
    obj = get_site(site)
    if not inv.Device.objects.filter(site=obj, code=code).exists():
        raise Http404(f"no device {code!r} at {site}")
    doc, netlist = site_input(obj)
    plan = actions.isolation_plan(doc, code, netlist=netlist)
    try:
        pdf = worksheet_for_plan(
            plan,
            site_name=obj.name,
            revision=obj.revision,
            svg=drawing.devices_drawing(netlist, [code]),
            prepared_by=request.user.get_username(),
        )
    except WorksheetRefused as exc:
        return _refused(request, obj, f"device {code}", exc.reason)
    return _pdf(pdf, f"{obj.code}-{code}-worksheet")


@viewer_required
def procedure_worksheet(request: HttpRequest, site: str, code: str) -> HttpResponse:
    """The work sheet of a stored procedure, from its stored verdict: only when that verdict
    is safe and computed from the record as it is now."""
    obj = get_site(site)
    proc = records.procedures_queryset(site_id=obj.pk).filter(code=code).first()
    if proc is None:
        raise Http404(f"no procedure {code!r} at {site}")
    row = selectors.procedure_verdict_rows(site_id=obj.pk).get(code)
    subject = f"procedure {code}"
    if row is None:
        return _refused(
            request,
            obj,
            subject,
            "this procedure has no stored verdict yet (its check has not run); try again "
            "when the site's results are computed",
        )
    _, netlist = site_input(obj)
    devices = list(proc.devices or ())
    try:
        pdf = worksheet_for_procedure(
            row.verdict,
            site_name=obj.name,
            title=proc.title,
            devices=devices,
            revision=obj.revision,
            checked_revision=row.revision,
            svg=drawing.devices_drawing(netlist, devices),
            prepared_by=request.user.get_username(),
        )
    except WorksheetRefused as exc:
        return _refused(request, obj, subject, exc.reason)
    return _pdf(pdf, f"{obj.code}-{code}-worksheet")
