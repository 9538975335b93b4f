"""Reads only the pages need (everything the API also answers is read through the selectors of
``inventory`` and ``analysis``): the search box of the home page."""

from __future__ import annotations

from dataclasses import dataclass

from django.db.models import Q

from inventory import models as inv

# What a code can name, the label shown, and the model holding it (each one indexed query).
_SEARCHED = (
    ("ct", "CT", inv.CurrentTransformer),
    ("device", "device", inv.Device),
    ("procedure", "procedure", inv.Procedure),
    ("switch", "switch", inv.Switch),
    ("equipment", "equipment", inv.Equipment),
    ("bus", "bus", inv.Bus),
)


@dataclass(frozen=True)
class Hit:
    """One code found: what it is, the site holding it, and the code."""

    kind: str
    label: str
    site: str
    code: str


def code_search(text: str, *, limit: int = 50) -> list[Hit]:
    """Sites, CTs, devices, procedures, switches, equipment and buses whose code holds
    ``text`` (any case), exact matches first, at most ``limit`` of each kind: one query per
    kind whatever the size of the fleet."""
    text = text.strip()
    if not text:
        return []
    hits: list[Hit] = [
        Hit("site", "site", code, code)
        for code in inv.Site.objects.filter(Q(code__icontains=text) | Q(name__icontains=text))
        .order_by("code")
        .values_list("code", flat=True)[:limit]
    ]
    for kind, label, model in _SEARCHED:
        rows = (
            model.objects.filter(code__icontains=text)
            .order_by("site__code", "code")
            .values_list("site__code", "code")[:limit]
        )
        hits.extend(Hit(kind, label, site, code) for site, code in rows)
    folded = text.casefold()
    return sorted(hits, key=lambda h: h.code.casefold() != folded)
