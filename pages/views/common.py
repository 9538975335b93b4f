"""Helpers shared by the page views."""

from __future__ import annotations

from typing import Any

from django.core.paginator import Page, Paginator
from django.http import Http404, HttpRequest

from analysis import actions
from inventory import models as inv
from inventory import selectors as records

PAGE_SIZE = 25


def get_site(code: str) -> inv.Site:
    site = inv.Site.objects.filter(code=code).first()
    if site is None:
        raise Http404(f"no site {code!r}")
    return site


def site_input(site: inv.Site) -> tuple[dict[str, Any], Any]:
    """The site document and netlist at the site's current revision, from the same per-thread
    cache as the API (``analysis.actions.site_netlist``)."""
    return actions.site_netlist(site.record_version, lambda: records.site_document(site))


def paginate(request: HttpRequest, items: Any, param: str, per_page: int = PAGE_SIZE) -> Page:
    """One page of ``items`` (a queryset or a list); ``param`` names its page number in the
    query string, so several lists of one page keep their own place."""
    return Paginator(items, per_page).get_page(request.GET.get(param))


def is_htmx(request: HttpRequest) -> bool:
    """A partial request made by htmx (it sends ``HX-Request: true``)."""
    return request.headers.get("HX-Request") == "true"


def hx_target(request: HttpRequest) -> str | None:
    return request.headers.get("HX-Target") if is_htmx(request) else None
