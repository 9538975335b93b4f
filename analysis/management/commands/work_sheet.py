"""``manage.py work_sheet SITE --device D | --procedure P [--out FILE]``: the printable work
sheet (PDF) of a device's isolation plan or of a stored procedure, both checked now against the
stored record, with the circuit drawing. An unsafe procedure or an impossible plan prints no
sheet: the command says why and exits with status 3."""

from __future__ import annotations

from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from analysis import actions
from analysis.drawing import circuit_svg
from analysis.sources import EXIT_UNSAFE, require, unknown
from analysis.worksheet import WorksheetRefused, worksheet_for_plan, worksheet_for_procedure
from inventory.models import Site
from inventory.selectors import site_document


class Command(BaseCommand):
    help = (
        "Write the printable work sheet (PDF) of a device's isolation plan or of a stored "
        "procedure, checked now against the stored record. Exit status: 0 written; 3 no sheet "
        "(an unsafe procedure, an impossible plan, or the record changed while it was read; the "
        "reason on stderr); 2 for a usage or input error."
    )

    def add_arguments(self, parser) -> None:
        parser.add_argument("site", metavar="SITE")
        what = parser.add_mutually_exclusive_group(required=True)
        what.add_argument("--device", help="the isolation plan of this device")
        what.add_argument("--procedure", help="this stored procedure")
        parser.add_argument(
            "--out", help="the PDF file to write (default: worksheet-SITE-CODE.pdf here)"
        )

    def handle(self, *args, site: str, device: str | None, procedure: str | None, **options):
        try:
            row = Site.objects.get(code=site)
        except Site.DoesNotExist as exc:
            raise unknown("site", site, Site.objects.values_list("code", flat=True)) from exc
        checked = row.revision
        doc = site_document(row)
        # a write between the two reads would pair the document with the wrong revision
        now = Site.objects.values_list("revision", flat=True).get(pk=row.pk)
        code = str(device or procedure)
        require(doc, "device" if device else "procedure", code)
        try:
            if device:
                plan = actions.isolation_plan(doc, device)
                pdf = worksheet_for_plan(
                    plan,
                    site_name=row.name,
                    revision=now,
                    checked_revision=checked,
                    svg=circuit_svg(doc, device=device, highlight=[device]),
                )
            else:
                verdict = actions.procedure_check(doc, code)
                proc = next(p for p in doc["procedures"] if p["code"] == code)
                devices = list(proc.get("devices") or ())
                drawing = circuit_svg(doc, devices=devices, highlight=devices) if devices else None
                pdf = worksheet_for_procedure(
                    verdict,
                    site_name=row.name,
                    title=str(proc.get("title") or code),
                    devices=devices,
                    revision=now,
                    checked_revision=checked,
                    svg=drawing,
                )
        except WorksheetRefused as exc:
            raise CommandError(f"no work sheet: {exc.reason}", returncode=EXIT_UNSAFE) from exc
        out = Path(options.get("out") or f"worksheet-{site}-{code}.pdf".replace("/", "_"))
        out.write_bytes(pdf)
        self.stdout.write(str(out))
