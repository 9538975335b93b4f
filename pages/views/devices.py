"""The device page: what feeds it, its isolation plan and restore (each step's ``why``,
stage findings and expected clamp-meter readings), the collateral, and saving the plan as a
procedure (editor)."""

from __future__ import annotations

from typing import Any

from django.core.exceptions import ValidationError
from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import redirect, render
from django.urls import reverse

from analysis import actions, selectors
from inventory import models as inv
from inventory import selectors as records
from inventory.services import procedure_save
from pages.access import editor_required, viewer_required
from pages.views import drawing
from pages.views.common import get_site, site_input
from pages.views.procedures import first_danger_finding, with_worst
from record.operations import operation_from_json


def _device(site: inv.Site, code: str) -> Any:
    device = records.devices_queryset(site_id=site.pk).filter(code=code).first()
    if device is None:
        raise Http404(f"no device {code!r} at {site.code}")
    return device


def plan_steps(plan: dict[str, Any]) -> list[dict[str, Any]]:
    """Every step of the plan as the procedure page shows a step: step 0 (the normal state),
    then the isolation and the restoration, numbered as the plan's verdict numbers them, each
    with its operation, ``why``, findings per stage and the readings after it; ``part``
    marks where the isolation and the restoration begin."""
    verdict = plan.get("verdict") or {"steps": []}
    by_number = {s["step"]: s for s in verdict["steps"]}
    start = by_number.get(0, {"findings": [], "readings": []})
    ops = [*plan["isolate"], *plan["restore"]]
    rows = [
        {
            "step": 0,
            "op": None,
            "why": "",
            "findings": start["findings"],
            "readings": start.get("readings") or [],
        }
    ]
    for number, op in enumerate(ops, start=1):
        checked = by_number.get(number, {})
        rows.append(
            {
                "step": number,
                "op": operation_from_json(op).to_json(),
                "why": op.get("why", ""),
                "readings": op.get("readings") or checked.get("readings") or [],
                "findings": checked.get("findings", []),
            }
        )
    if plan["isolate"]:
        rows[1]["part"] = "Isolate"
    if plan["restore"]:
        rows[len(plan["isolate"]) + 1]["part"] = "Restore"
    return with_worst(rows)


def plan_operations(plan: dict[str, Any]) -> list[dict[str, Any]]:
    """The plan as stored steps: the operations only (``why`` and readings are the plan's)."""
    return [operation_from_json(op).to_json() for op in [*plan["isolate"], *plan["restore"]]]


def _context(site: inv.Site, code: str, **extra: Any) -> dict[str, Any]:
    """The page's context. Of the plan's step drawings only the step the walk opens at is
    drawn into the page; each other step's drawing is fetched when the walk reaches it
    (``device_plan_step_drawing``)."""
    device = _device(site, code)
    doc, netlist = site_input(site)
    plan = actions.isolation_plan(doc, code, netlist=netlist)
    steps = plan_steps(plan) if plan["possible"] else []
    danger = first_danger_finding(plan["verdict"]) if plan.get("verdict") else None
    drawn = drawing.walk_drawings(
        steps,
        netlist,
        plan.get("verdict"),
        start=danger["step"] if danger else 0,
        devices=[code],
        url_of=lambda n: reverse("pages:device-plan-step-drawing", args=[site.code, code, n]),
        record_version=site.record_version,
    )
    return {
        "site": site,
        "device": device,
        "plan": plan,
        "steps": steps,
        "n_isolate": len(plan["isolate"]),
        "n_restore": len(plan["restore"]),
        "with_drawings": drawn,
        "danger": danger,
        "feeding": sorted(
            {m.code for m in selectors.cts_feeding_device(site_id=site.pk, device=code)}
        ),
        "findings": selectors.findings_queryset(site=site.code).filter(device=code),
        "svg": None if drawn else drawing.devices_drawing(netlist, [code]),
        "save_code": f"P-{code}-PLAN",
        "save_title": f"Isolate {code} (from its plan)",
        **extra,
    }


@viewer_required
def device_page(request: HttpRequest, site: str, code: str) -> HttpResponse:
    return render(request, "pages/device.html", _context(get_site(site), code))


@viewer_required
def device_plan_step_drawing(request: HttpRequest, site: str, code: str, step: int) -> HttpResponse:
    """The drawing of one step of the device page's plan (planned again at the same record
    version: the same plan and the same bytes as drawing every step at once), fetched when the
    walk reaches it (``drawing.step_drawing_response``: a changed record answers with a note
    to reload)."""
    obj = get_site(site)
    _device(obj, code)

    def draw() -> str | None:
        doc, netlist = site_input(obj)
        plan = actions.isolation_plan(doc, code, netlist=netlist)
        if not plan["possible"]:
            return None
        return drawing.procedure_step_drawing(netlist, plan["verdict"], step=step, devices=[code])

    return drawing.step_drawing_response(
        request,
        record_version=obj.record_version,
        draw=draw,
        what=f"step {step} of the plan of {code} at {site}",
    )


@editor_required
def device_save_plan(request: HttpRequest, site: str, code: str) -> HttpResponse:
    """Store the plan, computed again now, as a procedure through the service."""
    obj = get_site(site)
    if request.method != "POST":
        return redirect("pages:device", site, code)
    _device(obj, code)
    doc, netlist = site_input(obj)
    plan = actions.isolation_plan(doc, code, netlist=netlist)
    save_code = request.POST.get("code", "").strip()
    title = request.POST.get("title", "").strip()
    errors: list[str] = []
    if not plan["possible"]:
        errors.append(f"no safe plan to save: {plan['reason']}")
    else:
        proc = inv.Procedure(
            site=obj,
            code=save_code,
            title=title,
            author=request.user.get_username(),
            devices=[code],
        )
        try:
            procedure_save(procedure=proc, steps=plan_operations(plan))
        except ValidationError as exc:
            errors.extend(
                f"{'' if k == '__all__' else k + ': '}{m}"
                for k, msgs in exc.message_dict.items()
                for m in msgs
            )
        else:
            return redirect(reverse("pages:procedure", args=[obj.code, proc.code]))
    context = _context(obj, code, save_errors=errors, save_code=save_code, save_title=title)
    return render(request, "pages/device.html", context, status=400)
