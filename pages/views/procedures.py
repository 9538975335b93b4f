"""The procedure page: the verdict computed now, step by step, beside the drawing of the
step shown (each step's drawing fetched when the walk reaches it)."""

from __future__ import annotations

from typing import Any

from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import render
from django.urls import reverse

from analysis import actions, selectors
from analysis.engine import ProcedureError
from inventory import selectors as records
from pages.access import viewer_required
from pages.views import drawing
from pages.views.common import get_site, site_input


def first_danger_finding(verdict: dict[str, Any]) -> dict[str, Any] | None:
    """The finding the verdict's ``first_danger`` points at (it carries the message)."""
    danger = verdict.get("first_danger")
    if not danger:
        return None
    step = next((s for s in verdict["steps"] if s["step"] == danger["step"]), None)
    for finding in step["findings"] if step else []:
        if finding["severity"] == "danger" and all(
            finding.get(k) == danger.get(k) for k in ("code", "stage", "ct", "device")
        ):
            return {**finding, "step": danger["step"]}
    return {**danger, "message": ""}


def with_worst(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Each step row with ``worst``: the most severe of its findings (None without any)."""
    for row in rows:
        severities = {f["severity"] for f in row["findings"]}
        row["worst"] = next(
            (s for s in ("danger", "warning", "caution", "notice") if s in severities), None
        )
    return rows


def step_rows(verdict: dict[str, Any]) -> list[dict[str, Any]]:
    """The verdict's steps with what a row shows: its worst severity and readings."""
    return with_worst(
        [{**step, "readings": step.get("readings") or []} for step in verdict["steps"]]
    )


def _verdict(site: Any, proc: Any) -> tuple[dict[str, Any] | None, str | None]:
    """The verdict of the stored procedure at the site's current revision (computed now, or
    kept from an earlier request at the same revision: ``actions.procedure_check_at``, as the
    API), or the error that stops the check."""
    try:
        return actions.procedure_check_at(
            site.record_version, proc.code, lambda: records.site_document(site)
        ), None
    except ProcedureError as exc:
        return None, str(exc)


def procedure_context(site: Any, proc: Any) -> dict[str, Any]:
    """The page's context. Of the step drawings (about 35 KB each) only the step the walk
    starts at (the first danger, else the normal state) is drawn into the page; each other
    step's drawing is fetched when the walk reaches it (``procedure_step_drawing``)."""
    _doc, netlist = site_input(site)
    verdict, error = _verdict(site, proc)
    steps = step_rows(verdict) if verdict else []
    danger = first_danger_finding(verdict) if verdict else None
    drawn = drawing.walk_drawings(
        steps,
        netlist,
        verdict,
        start=danger["step"] if danger else 0,
        devices=list(proc.devices or ()),
        url_of=lambda n: reverse("pages:procedure-step-drawing", args=[site.code, proc.code, n]),
        record_version=site.record_version,
    )
    row = selectors.procedure_verdict_rows(site_id=site.pk).get(proc.code)
    return {
        "site": site,
        "procedure": proc,
        "verdict": verdict,
        "error": error,
        "steps": steps,
        "danger": danger,
        "with_drawings": drawn,
        "stored": row,
    }


def _procedure(site: Any, code: str) -> Any:
    proc = records.procedures_queryset(site_id=site.pk).filter(code=code).first()
    if proc is None:
        raise Http404(f"no procedure {code!r} at {site.code}")
    return proc


@viewer_required
def procedure_page(request: HttpRequest, site: str, code: str) -> HttpResponse:
    """A stored procedure checked now (every transition included), its steps to walk."""
    obj = get_site(site)
    return render(request, "pages/procedure.html", procedure_context(obj, _procedure(obj, code)))


@viewer_required
def procedure_step_drawing(request: HttpRequest, site: str, code: str, step: int) -> HttpResponse:
    """The drawing of one step of the procedure page's verdict, fetched when the walk reaches
    it (``drawing.step_drawing_response``: a changed record answers with a note to reload)."""
    obj = get_site(site)
    proc = _procedure(obj, code)

    def draw() -> str | None:
        _doc, netlist = site_input(obj)
        verdict, _error = _verdict(obj, proc)
        if verdict is None:
            return None
        return drawing.procedure_step_drawing(
            netlist, verdict, step=step, devices=list(proc.devices or ())
        )

    return drawing.step_drawing_response(
        request,
        record_version=obj.record_version,
        draw=draw,
        what=f"step {step} of {code} at {site}",
    )
