"""``manage.py ct_plot SITE CT [--out DIR] [--format png|svg]`` (or ``--file FILE CT``): write the
CT's excitation curve at the tap in use (knee points and required operating point marked) and its
burden-by-element bar chart as image files."""

from __future__ import annotations

from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from analysis.compute import ct_plots
from analysis.sources import load_document, split_targets


class Command(BaseCommand):
    help = "Write a CT's excitation and burden plots (PNG or SVG)."

    def add_arguments(self, parser) -> None:
        parser.add_argument("targets", nargs="+", metavar="SITE CT")
        parser.add_argument("--file", help="plot from a site file instead of a stored site")
        parser.add_argument("--out", default=".", help="folder to write into (default: here)")
        parser.add_argument("--format", choices=("png", "svg"), default="png", dest="fmt")

    def handle(self, *args, targets: list[str], file: str | None, out: str, fmt: str, **opts):
        site, ct = split_targets(targets, file=file, what="ct")
        doc = load_document(site=site, file=file)
        try:
            images = ct_plots(doc, ct, fmt)
        except KeyError as exc:
            raise CommandError(str(exc).strip('"')) from exc
        folder = Path(out)
        folder.mkdir(parents=True, exist_ok=True)
        for name, data in images.items():
            path = folder / f"{doc['site']['code']}_{ct}_{name}.{fmt}"
            path.write_bytes(data)
            self.stdout.write(str(path))
