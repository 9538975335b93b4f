"""The printable work sheet (PDF, reportlab): what a crew carries to the panel.

One sheet for a verified isolation plan or a safe stored procedure: the site, the work, the
record revision it was checked against, the drawing, the numbered steps with a box to initial
and the expected clamp-meter readings beside a blank to write the reading taken, the restore
steps, sign-off lines, and the cautions in the footer of every page. A plan that is not
possible, a verdict that is not safe, or one computed from an older revision of the record
prints no sheet: ``WorksheetRefused`` says why (a sheet is something people act on, so only a
current, safe answer becomes one).

reportlab is pure Python (no system libraries to install); the drawing's SVG goes through
svglib into reportlab's vector graphics, so it stays sharp when printed. The PDF is written
with reportlab's ``invariant`` option: the same input gives the same bytes.
"""

from __future__ import annotations

import io
from collections.abc import Mapping, Sequence
from typing import Any

from reportlab.graphics.shapes import Drawing
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4, landscape
from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.pdfgen import canvas as rl_canvas
from reportlab.platypus import (
    BaseDocTemplate,
    CondPageBreak,
    Frame,
    KeepTogether,
    NextPageTemplate,
    PageBreak,
    PageTemplate,
    Paragraph,
    Spacer,
    Table,
    TableStyle,
)
from reportlab.platypus.flowables import Flowable
from svglib.svglib import svg2rlg

from analysis.engine.cautions import cautions as default_cautions
from analysis.textout import op_text

PAGE = A4
MARGIN = 15 * mm
HEADER_H = 14 * mm
INK = colors.HexColor("#2b2b2b")
RULE = colors.HexColor("#9a9a9a")
SHADE = colors.HexColor("#f2f2f2")

# Characters outside the standard PDF fonts' encoding, as a crew would write them.
_PLAIN = str.maketrans({"→": "->", "≈": "~", "Ω": "ohm", "≤": "<=", "≥": ">=", "−": "-"})

SIGN_OFF = (
    "Prepared by",
    "Checked by",
    "Isolation carried out by",
    "Restored to service by",
)


class WorksheetRefused(Exception):
    """No work sheet for this answer; ``reason`` says why, in words for the planner."""

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


def _p(text: str) -> str:
    """Text for a reportlab Paragraph: plain characters, XML special characters escaped."""
    text = str(text).translate(_PLAIN)
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _styles() -> dict[str, ParagraphStyle]:
    base = getSampleStyleSheet()
    body = ParagraphStyle("lk-body", parent=base["BodyText"], fontSize=9, leading=11)
    return {
        "title": ParagraphStyle("lk-title", parent=base["Title"], fontSize=15, alignment=TA_LEFT),
        "h2": ParagraphStyle("lk-h2", parent=base["Heading2"], fontSize=11, spaceBefore=8),
        "body": body,
        "small": ParagraphStyle("lk-small", parent=body, fontSize=7.5, leading=9),
        "why": ParagraphStyle("lk-why", parent=body, fontSize=7.5, leading=9, textColor=RULE),
        "caution": ParagraphStyle("lk-caution", parent=body, fontSize=6.8, leading=8),
    }


def _fit(drawing: Drawing, width: float, height: float) -> Drawing:
    """Scale a drawing down (never up) to fit ``width`` × ``height``."""
    scale = min(1.0, width / max(drawing.width, 1.0), height / max(drawing.height, 1.0))
    drawing.scale(scale, scale)
    drawing.width *= scale
    drawing.height *= scale
    return drawing


def _readings_cells(
    readings: Sequence[Mapping[str, Any]], st: dict[str, ParagraphStyle]
) -> tuple[Paragraph, Paragraph]:
    if not readings:
        return Paragraph("-", st["small"]), Paragraph("", st["small"])
    expected = []
    blanks = []
    for r in readings:
        ends = [str(x) for x in r.get("between") or ()]
        a, b = [*ends, "?", "?"][:2]
        approx = "~" if r.get("parallel") else ""
        expected.append(f"{_p(a)} - {_p(b)}: <b>{approx}{float(r['a']):.2f} A</b>")
        blanks.append("________ A")
    return (
        Paragraph("<br/>".join(expected), st["small"]),
        Paragraph("<br/>".join(blanks), st["small"]),
    )


def _step_table(
    steps: Sequence[Mapping[str, Any]], first: int, st: dict[str, ParagraphStyle], width: float
) -> Table:
    head = [
        Paragraph("<b>No.</b>", st["small"]),
        Paragraph("<b>Operation</b>", st["small"]),
        Paragraph("<b>Expected reading (clamp meter)</b>", st["small"]),
        Paragraph("<b>Reading taken</b>", st["small"]),
        Paragraph("<b>Done (initials)</b>", st["small"]),
    ]
    rows: list[list[Any]] = [head]
    for n, step in enumerate(steps, start=first):
        op = step.get("op")
        text = f"<b>{_p(op_text(dict(op)) if op else '(no operation)')}</b>"
        if step.get("why"):
            text += f"<br/><font size='7.5'>{_p(str(step['why']))}</font>"
        expected, blanks = _readings_cells(step.get("readings") or (), st)
        rows.append(
            [Paragraph(str(n), st["body"]), Paragraph(text, st["body"]), expected, blanks, ""]
        )
    cols = [10 * mm, None, 62 * mm, 24 * mm, 18 * mm]
    fixed = sum(c for c in cols if c is not None)
    cols[1] = width - fixed
    table = Table(rows, colWidths=cols, repeatRows=1)
    table.setStyle(
        TableStyle(
            [
                ("GRID", (0, 0), (-1, -1), 0.5, RULE),
                ("BACKGROUND", (0, 0), (-1, 0), SHADE),
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                # the box to initial: a heavier frame in the last column
                ("BOX", (4, 1), (4, -1), 1.2, INK),
                ("LINEBELOW", (4, 1), (4, -1), 1.2, INK),
            ]
        )
    )
    return table


def _sign_off(st: dict[str, ParagraphStyle], width: float) -> Table:
    rows: list[list[Any]] = [
        [
            Paragraph("<b>Role</b>", st["small"]),
            Paragraph("<b>Name</b>", st["small"]),
            Paragraph("<b>Signature</b>", st["small"]),
            Paragraph("<b>Date and time</b>", st["small"]),
        ]
    ]
    for role in SIGN_OFF:
        rows.append([Paragraph(role, st["body"]), "", "", ""])
    table = Table(
        rows,
        colWidths=[width * 0.3, width * 0.25, width * 0.25, width * 0.2],
        rowHeights=[None] + [9 * mm] * len(SIGN_OFF),
    )
    table.setStyle(
        TableStyle(
            [
                ("GRID", (0, 0), (-1, -1), 0.5, RULE),
                ("BACKGROUND", (0, 0), (-1, 0), SHADE),
                ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
            ]
        )
    )
    return table


class _Pages(rl_canvas.Canvas):
    """A canvas that knows the page count when it draws each page's "page n of m"."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._saved: list[dict[str, Any]] = []

    def showPage(self) -> None:
        self._saved.append(dict(self.__dict__))
        self._startPage()

    def save(self) -> None:
        total = len(self._saved)
        for state in self._saved:
            self.__dict__.update(state)
            width, height = self._pagesize
            self.setFont("Helvetica", 7)
            self.setFillColor(INK)
            self.drawRightString(
                width - MARGIN, height - MARGIN + 2, f"page {self._pageNumber} of {total}"
            )
            super().showPage()
        super().save()


def _footer_h(paras: Sequence[Paragraph], width: float) -> float:
    """Height the cautions take at ``width`` (they are wrapped again on each page)."""
    return sum(p.wrap(width, PAGE[1])[1] + 1 for p in paras) + 6


def worksheet_pdf(
    *,
    site: str,
    site_name: str,
    subject: str,
    subtitle: str,
    revision: int,
    svg: str | None,
    steps: Sequence[Mapping[str, Any]],
    restore: Sequence[Mapping[str, Any]],
    cautions: Sequence[str],
    prepared_by: str = "",
    affected: Sequence[str] = (),
) -> bytes:
    """The work sheet as PDF bytes (A4; a drawing wider than tall gets a landscape page).

    ``steps`` and ``restore``: ``{"op": operation dict or None, "why": text (optional),
    "readings": [{"between": [T1, T2], "a": amps, "parallel": bool}]}`` in order; ``restore``
    may be empty (a stored procedure holds its restoration among its steps). ``cautions``
    are printed in the footer of every page; none given means the engine's. ``affected``:
    the protection and metering lost on other devices while the work is under way."""
    cautions = list(cautions) or default_cautions()
    st = _styles()
    buf = io.BytesIO()
    header = f"Work sheet  {site}  {subject}  (record revision {revision})"
    caution_paras = [Paragraph(f"<b>CAUTION.</b> {_p(c)}", st["caution"]) for c in cautions]
    sizes = {"portrait": PAGE, "landscape": landscape(PAGE)}
    footers = {k: _footer_h(caution_paras, w - 2 * MARGIN) for k, (w, _h) in sizes.items()}

    def on_page(canvas: rl_canvas.Canvas, doc: Any) -> None:
        page_w, page_h = canvas._pagesize
        width = page_w - 2 * MARGIN
        canvas.saveState()
        top = page_h - MARGIN
        canvas.setFont("Helvetica-Bold", 9)
        canvas.setFillColor(INK)
        canvas.drawString(MARGIN, top + 2, str(header).translate(_PLAIN))
        canvas.setStrokeColor(RULE)
        canvas.line(MARGIN, top - 2, page_w - MARGIN, top - 2)
        y = MARGIN + _footer_h(caution_paras, width) - 4
        canvas.line(MARGIN, y + 2, page_w - MARGIN, y + 2)
        for para in caution_paras:
            _w, h = para.wrap(width, page_h)
            y -= h
            para.drawOn(canvas, MARGIN, y)
            y -= 1
        canvas.restoreState()

    templates = []
    frames: dict[str, tuple[float, float]] = {}
    for name, (page_w, page_h) in sizes.items():
        fw = page_w - 2 * MARGIN
        fh = page_h - 2 * MARGIN - HEADER_H - footers[name]
        frames[name] = (fw, fh)
        frame = Frame(
            MARGIN,
            MARGIN + footers[name],
            fw,
            fh,
            id=name,
            leftPadding=0,
            rightPadding=0,
            topPadding=0,
            bottomPadding=0,
        )
        templates.append(
            PageTemplate(id=name, frames=[frame], onPage=on_page, pagesize=(page_w, page_h))
        )
    doc = BaseDocTemplate(
        buf,
        pagesize=PAGE,
        pageTemplates=templates,
        title=str(f"Work sheet {site} {subject}").translate(_PLAIN),
        author="Loopkeep",
        invariant=True,
    )
    width = frames["portrait"][0]
    story: list[Flowable] = [
        Paragraph(_p(f"Work sheet: {subject}"), st["title"]),
        Paragraph(_p(subtitle), st["body"]),
        Spacer(1, 3 * mm),
    ]
    facts = [
        ["Site", f"{site} - {site_name}"],
        ["Work", subject],
        ["Record revision checked against", str(revision)],
        ["Checked", "every step and every switch transition: no danger finding"],
        ["Prepared by", prepared_by or ""],
        ["Date of work", ""],
    ]
    facts_table = Table(
        [
            [Paragraph(f"<b>{_p(k)}</b>", st["body"]), Paragraph(_p(v), st["body"])]
            for k, v in facts
        ],
        colWidths=[55 * mm, width - 55 * mm],
    )
    facts_table.setStyle(TableStyle([("GRID", (0, 0), (-1, -1), 0.5, RULE)]))
    story += [facts_table, Spacer(1, 4 * mm)]
    if affected:
        story.append(Paragraph("Lost while the work is under way", st["h2"]))
        story += [Paragraph(f"- {_p(a)}", st["body"]) for a in affected]
        story.append(Spacer(1, 2 * mm))
    found = svg2rlg(io.BytesIO(svg.encode("utf-8"))) if svg else None
    if found is not None:
        wide = found.width > 1.2 * found.height
        fw, fh = frames["landscape" if wide else "portrait"]
        heading = Paragraph("Circuit (normal state)", st["h2"])
        if wide:
            story += [NextPageTemplate("landscape"), PageBreak(), heading]
            story += [_fit(found, fw, fh - 12 * mm), NextPageTemplate("portrait"), PageBreak()]
        else:
            story += [PageBreak(), heading, _fit(found, fw, fh - 12 * mm), PageBreak()]
    story.append(Paragraph("Isolation steps" if restore else "Steps", st["h2"]))
    story.append(
        Paragraph(
            "Carry out the steps in order. Before initialling a step, read the current with a "
            "clamp meter where a reading is expected and write it down; stop and ask if it "
            "differs.",
            st["small"],
        )
    )
    story.append(Spacer(1, 2 * mm))
    story.append(_step_table(steps, 1, st, width))
    if restore:
        story.append(CondPageBreak(40 * mm))
        story.append(Paragraph("Restore steps", st["h2"]))
        story.append(_step_table(restore, len(steps) + 1, st, width))
    story.append(
        KeepTogether([Paragraph("Sign-off", st["h2"]), _sign_off(st, width), Spacer(1, 2 * mm)])
    )
    doc.build(story, canvasmaker=_Pages)
    return buf.getvalue()


# ---------------------------------------------------------------------------------------------
# from the answers the engine gives


def _danger_text(verdict: Mapping[str, Any]) -> str:
    d = verdict.get("first_danger") or {}
    where = " ".join(
        x
        for x in (d.get("ct") and f"CT {d['ct']}", d.get("device") and f"device {d['device']}")
        if x
    )
    text = f"step {d.get('step')} ({d.get('stage')}): {d.get('code')}"
    return text + (f" on {where}" if where else "")


def _check_current(revision: int, checked_revision: int | None, answer: Mapping[str, Any]) -> None:
    if answer.get("stale"):
        raise WorksheetRefused(
            "The check is stale: the record changed after it was computed. Check it again "
            "against the current record before printing a work sheet."
        )
    if checked_revision is not None and checked_revision != revision:
        raise WorksheetRefused(
            f"The check was made against record revision {checked_revision}; the record is now "
            f"at revision {revision}. Check it again before printing a work sheet."
        )


def _plan_step(item: Mapping[str, Any]) -> dict[str, Any]:
    op = {k: v for k, v in item.items() if k not in ("why", "readings")}
    return {"op": op, "why": item.get("why"), "readings": item.get("readings") or []}


def worksheet_for_plan(
    plan: Mapping[str, Any],
    *,
    site_name: str,
    revision: int,
    checked_revision: int | None = None,
    svg: str | None = None,
    prepared_by: str = "",
) -> bytes:
    """The work sheet of an isolation plan (``analysis.actions.isolation_plan``'s JSON).

    Raises ``WorksheetRefused`` when the plan is not possible, its check of isolate + restore
    is missing or not safe, or it was computed from another revision of the record
    (``checked_revision`` differs from ``revision``, or the JSON says ``stale``)."""
    _check_current(revision, checked_revision, plan)
    device = plan.get("device")
    if not plan.get("possible"):
        reason = plan.get("reason") or "the recorded provisions cannot isolate it safely"
        raise WorksheetRefused(f"No safe isolation plan for {device}: {reason}")
    verdict = plan.get("verdict")
    if not verdict:
        raise WorksheetRefused(f"The plan for {device} carries no check of its steps.")
    if not verdict.get("safe"):
        raise WorksheetRefused(
            f"The plan for {device} did not pass its check: {_danger_text(verdict)}."
        )
    isolate = [_plan_step(x) for x in plan.get("isolate") or ()]
    if not isolate:
        raise WorksheetRefused(f"The plan for {device} has no steps to print.")
    affected = [
        str(a.get("message") or a) if isinstance(a, Mapping) else str(a)
        for a in plan.get("affected") or ()
    ]
    subtitle = f"Take {device} out of service and put it back (isolation plan)."
    return worksheet_pdf(
        site=str(plan.get("site")),
        site_name=site_name,
        subject=f"device {device}",
        subtitle=subtitle,
        revision=revision,
        svg=svg,
        steps=isolate,
        restore=[_plan_step(x) for x in plan.get("restore") or ()],
        cautions=list(plan.get("cautions") or ()),
        prepared_by=prepared_by,
        affected=affected,
    )


def worksheet_for_procedure(
    verdict: Mapping[str, Any],
    *,
    site_name: str,
    title: str,
    devices: Sequence[str],
    revision: int,
    checked_revision: int | None,
    svg: str | None = None,
    prepared_by: str = "",
) -> bytes:
    """The work sheet of a stored procedure from its verdict (``procedure_check``'s JSON).

    Raises ``WorksheetRefused`` when the verdict is not safe (naming its first danger), has
    no steps, or is not current (``checked_revision`` differs from ``revision``, or the JSON
    says ``stale``)."""
    _check_current(revision, checked_revision, verdict)
    code = verdict.get("procedure") or "draft"
    if not verdict.get("safe"):
        raise WorksheetRefused(
            f"Procedure {code} is not safe: {_danger_text(verdict)}. Fix it and check it again."
        )
    steps = [
        {"op": s.get("op"), "readings": s.get("readings") or []}
        for s in verdict.get("steps") or ()
        if s.get("step", 0) > 0
    ]
    if not steps:
        raise WorksheetRefused(f"Procedure {code} has no steps to print.")
    work = ", ".join(devices) or "no device named"
    return worksheet_pdf(
        site=str(verdict.get("site")),
        site_name=site_name,
        subject=f"procedure {code}",
        subtitle=f"{title} (work on: {work}).",
        revision=revision,
        svg=svg,
        steps=steps,
        restore=[],
        cautions=list(verdict.get("cautions") or ()),
        prepared_by=prepared_by,
    )
