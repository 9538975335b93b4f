"""The procedure page: the verdict computed now, step by step, beside the drawing."""

from __future__ import annotations

from typing import Any

from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import render

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


def procedure_context(site: Any, proc: Any) -> dict[str, Any]:
    doc, netlist = site_input(site)
    try:
        verdict = actions.procedure_check(doc, proc.code, netlist=netlist)
        error = None
    except ProcedureError as exc:
        verdict, error = None, str(exc)
    svgs = (
        drawing.procedure_drawings(netlist, verdict, devices=list(proc.devices or ()))
        if verdict is not None
        else []
    )
    steps = step_rows(verdict) if verdict else []
    for step, svg in zip(steps, svgs, strict=False):
        step["svg"] = svg
    row = selectors.procedure_verdict_rows(site_id=site.pk).get(proc.code)
    return {
        "site": site,
        "procedure": proc,
        "verdict": verdict,
        "error": error,
        "steps": steps,
        "danger": first_danger_finding(verdict) if verdict else None,
        "with_drawings": bool(svgs),
        "stored": row,
    }


@viewer_required
def procedure_page(request: HttpRequest, site: str, code: str) -> HttpResponse:
    """A stored procedure checked now (every transition included), its steps to walk."""
    obj = get_site(site)
    proc = records.procedures_queryset(site_id=obj.pk).filter(code=code).first()
    if proc is None:
        raise Http404(f"no procedure {code!r} at {site}")
    return render(request, "pages/procedure.html", procedure_context(obj, proc))
