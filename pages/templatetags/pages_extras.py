"""Template filters of the pages: operations and readings in the planner's words, and the
severity mark (text and a shape, never colour alone)."""

from __future__ import annotations

from typing import Any

from django import template
from django.utils.html import format_html

from analysis.textout import op_text as _op_text
from analysis.textout import readings_text as _readings_text

register = template.Library()

# Each severity has a word and a shape of its own, so it reads without colour.
_MARKS = {
    "danger": ("▲", "DANGER"),
    "warning": ("◆", "WARNING"),
    "caution": ("●", "CAUTION"),
    "notice": ("○", "NOTICE"),
}


@register.filter
def op_text(op: dict[str, Any] | None) -> str:
    return _op_text(op)


@register.filter
def readings_text(readings: list[dict[str, Any]] | None) -> str:
    return _readings_text(readings or [])


@register.filter
def severity_mark(severity: str | None) -> str:
    shape, word = _MARKS.get(severity or "", ("·", (severity or "").upper()))
    return format_html(
        '<span class="sev sev-{}"><span aria-hidden="true">{}</span> {}</span>',
        severity or "none",
        shape,
        word,
    )


@register.filter
def get_item(mapping: dict[str, Any], key: str) -> Any:
    return mapping.get(key)


@register.filter
def ratio_pair(pair: list[str] | tuple[str, ...]) -> str:
    return "–".join(pair)
