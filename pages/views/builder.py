"""The procedure builder: compose or edit a procedure by picking from lists; every change is
checked as a draft (nothing stored) and the verdict shown; saving is an editor's action
through ``inventory.services.procedure_save``."""

from __future__ import annotations

from typing import Any

from django.core.exceptions import ValidationError
from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import redirect, render
from django.urls import reverse

from analysis import actions
from analysis.engine import ProcedureError
from api.roles import EDITOR, has_role
from inventory import models as inv
from inventory import selectors as records
from inventory.services import procedure_save
from pages.access import viewer_required
from pages.builder import OP_LABELS, Choices, Draft, apply_action, draft_from_post
from pages.views.common import get_site, is_htmx, site_input
from pages.views.procedures import first_danger_finding, step_rows


def _check(doc: dict[str, Any], netlist: Any, draft: Draft) -> dict[str, Any] | None:
    """The draft's verdict (nothing stored), or None with the reason in ``draft.errors``."""
    try:
        return actions.draft_check(doc, draft.steps, draft.devices, netlist=netlist)
    except ProcedureError as exc:
        draft.errors.append(f"the steps cannot be checked: {exc}")
        return None


def _save(request: HttpRequest, site: inv.Site, proc: inv.Procedure | None, draft: Draft) -> Any:
    """Save the draft through the service; the page to go to, or None with the errors."""
    if not has_role(request.user, EDITOR):
        draft.errors.append("saving needs the editor role; the draft was checked, not saved")
        return None
    target = proc or inv.Procedure(site=site, code=draft.code)
    target.title = draft.title
    target.devices = list(draft.devices)
    if not target.author:
        target.author = request.user.get_username()
    try:
        procedure_save(procedure=target, steps=list(draft.steps))
    except ValidationError as exc:
        for name, messages in exc.message_dict.items():
            where = "" if name == "__all__" else f"{name}: "
            draft.errors.extend(f"{where}{m}" for m in messages)
        return None
    return reverse("pages:procedure", args=[site.code, target.code])


def _builder(request: HttpRequest, site: str, code: str | None) -> HttpResponse:
    obj = get_site(site)
    proc = None
    if code is not None:
        proc = records.procedures_queryset(site_id=obj.pk).filter(code=code).first()
        if proc is None:
            raise Http404(f"no procedure {code!r} at {site}")
    doc, netlist = site_input(obj)
    choices = Choices.from_document(doc)
    if request.method == "POST":
        draft = draft_from_post(request.POST)
        if proc is not None:
            draft.code = proc.code
        unknown = [d for d in draft.devices if d not in choices.devices]
        draft.devices = [d for d in draft.devices if d in choices.devices]
        draft.errors.extend(f"no device {d!r} at {obj.code}" for d in unknown)
        action = request.POST.get("action", "refresh")
        if action == "save":
            url = _save(request, obj, proc, draft)
            if url is not None:
                if is_htmx(request):
                    return HttpResponse(status=204, headers={"HX-Redirect": url})
                return redirect(url)
        else:
            apply_action(draft, action, choices)
    elif proc is not None:
        draft = Draft(
            code=proc.code,
            title=proc.title,
            devices=list(proc.devices or ()),
            steps=[step.op for step in proc.steps.all()],
        )
    else:
        device = request.GET.get("device", "")
        draft = Draft(devices=[device] if device in choices.devices else [])
    if not draft.pick.get("op"):
        draft.pick["op"] = "set"
    verdict = _check(doc, netlist, draft)
    switch = draft.pick.get("switch", "")
    context = {
        "site": obj,
        "procedure": proc,
        "form_url": request.path,
        "draft": draft,
        "choices": choices,
        "op_labels": OP_LABELS,
        "positions": choices.switches.get(switch, []),
        "open_jumpers": draft.open_jumpers(),
        "next_jumper": draft.next_jumper_id(),
        "verdict": verdict,
        "steps": step_rows(verdict) if verdict else [],
        "danger": first_danger_finding(verdict) if verdict else None,
    }
    template = "pages/_builder_body.html" if is_htmx(request) else "pages/builder.html"
    return render(request, template, context)


@viewer_required
def builder_new(request: HttpRequest, site: str) -> HttpResponse:
    return _builder(request, site, None)


@viewer_required
def builder_edit(request: HttpRequest, site: str, code: str) -> HttpResponse:
    return _builder(request, site, code)
