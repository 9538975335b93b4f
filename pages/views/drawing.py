"""The circuit drawings of the pages, from ``analysis.drawing`` (one SVG per step, all of one
procedure with the same layout; the procedure and device pages draw the step the walk opens at
into the page and each other step per request, when the walk reaches it)."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any
from urllib.parse import urlencode

from django.http import Http404, HttpRequest, HttpResponse
from django.utils.cache import patch_vary_headers
from django.utils.html import format_html

from analysis.drawing import DrawingError, circuit_svg, step_states
from pages.views.common import is_htmx

STALE_DRAWING = (
    "The record of this site has changed since this page was loaded; reload the page to see "
    "the verdict and the drawings of the record as it is now."
)


def procedure_step_drawing(
    source: Any, verdict: dict[str, Any], *, step: int, devices: Sequence[str]
) -> str | None:
    """The SVG of one step of ``verdict``, the same bytes as ``procedure_svgs(...)[step]``
    (the layout still makes room for what every step adds, so the drawings of a walk line up)
    at the cost of one graphviz run instead of one per step. None when no device is named,
    the record cannot be drawn or there is no such step."""
    if not devices:
        return None
    try:
        states = step_states(source, verdict)
        if not 0 <= step < len(states):
            return None
        return circuit_svg(
            source,
            state=states[step],
            highlight=tuple(devices),
            devices=tuple(devices),
            layout_states=states,
        )
    except DrawingError:
        return None


def devices_drawing(source: Any, devices: Sequence[str]) -> str | None:
    """The devices' CT circuits and trip paths in the normal state (None: nothing to draw)."""
    if not devices:
        return None
    try:
        return circuit_svg(source, devices=tuple(devices), highlight=tuple(devices))
    except DrawingError:
        return None


def walk_drawings(
    steps: list[dict[str, Any]],
    source: Any,
    verdict: dict[str, Any] | None,
    *,
    start: int,
    devices: Sequence[str],
    url_of: Callable[[int], str],
    record_version: str,
) -> bool:
    """Give the step rows of ``verdict`` their drawings as the pages show them: the SVG of the
    step the walk opens at (``start``) drawn now, and on every other step the URL its drawing
    is fetched from (``url_of(step)``, pinned to the record version the rows were computed
    at). False (and nothing given) when there is nothing to draw."""
    if verdict is None or not steps:
        return False
    first = procedure_step_drawing(source, verdict, step=start, devices=devices)
    if first is None:
        return False
    at = urlencode({"at": record_version})
    for step in steps:
        if step["step"] == start:
            step["svg"] = first
        else:
            step["drawing_url"] = f"{url_of(step['step'])}?{at}"
    return True


def step_drawing_response(
    request: HttpRequest, *, record_version: str, draw: Callable[[], str | None], what: str
) -> HttpResponse:
    """The answer to a fetch of one step's drawing (``lazy_step_drawings``): the SVG
    ``draw()`` makes, as HTML for htmx to put into the page or as an SVG document for the
    no-script link. ``at`` is the record version the page was computed at: a drawing of
    another record would not match the steps beside it, so a changed record answers with a
    note to reload instead (200 for htmx so it is shown, else 409). 404 when there is no such
    drawing (``what`` says which)."""
    htmx = is_htmx(request)
    if request.GET.get("at") != record_version:
        if htmx:
            response = HttpResponse(
                format_html('<p class="banner stale" role="alert">{}</p>', STALE_DRAWING)
            )
        else:
            response = HttpResponse(STALE_DRAWING, status=409, content_type="text/plain")
        patch_vary_headers(response, ["HX-Request"])
        return response
    svg = draw()
    if svg is None:
        raise Http404(f"no drawing of {what}")
    response = HttpResponse(svg, content_type="text/html" if htmx else "image/svg+xml")
    # The drawing of a record version never changes: the browser may keep it.
    response["Cache-Control"] = "private, max-age=3600"
    patch_vary_headers(response, ["HX-Request"])
    return response
