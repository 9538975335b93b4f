"""``manage.py ct_plot SITE CT [--out DIR] [--format png|svg]`` (or ``--file FILE CT``): write the
CT's excitation curve at the tap in use (knee points and required operating point marked) and its
burden-by-element bar chart as image files, under ``var/plots/`` unless ``--out`` says where.

File names are made from the site and CT codes, which are data: every character other than a
letter, digit, ``-``, ``_`` or ``.`` becomes ``_`` and leading dots are dropped, so no code
(``../x``, ``a/b``, a control character) can put a file outside the output folder."""

from __future__ import annotations

import re
from pathlib import Path

from django.conf import settings
from django.core.management.base import BaseCommand

from analysis.compute import ct_plots
from analysis.sources import InputError, load_document, require, split_targets

_UNSAFE_CHARS = re.compile(r"[^A-Za-z0-9._-]+")


def safe_name(text: str) -> str:
    """``text`` as one file-name component: letters, digits, ``-``, ``_`` and ``.`` only, no
    leading dot, never empty, at most 100 characters."""
    name = _UNSAFE_CHARS.sub("_", text).lstrip(".")[:100]
    return name or "_"


def default_folder() -> Path:
    """``var/plots`` under the project's data folder (``VAR_DIR``, ``LOOPKEEP_VAR_DIR``)."""
    return Path(settings.VAR_DIR) / "plots"


class Command(BaseCommand):
    help = (
        "Write a CT's excitation and burden plots (PNG or SVG) under var/plots/ (or --out), one "
        "file per plot, and print their paths. Exit status: 0, or 2 for a usage or input error "
        "(an unknown site or CT, a site file with errors, an output folder that cannot be made)."
    )

    def add_arguments(self, parser) -> None:
        parser.add_argument("targets", nargs="*", metavar="SITE CT")
        parser.add_argument("--file", help="plot from a site file instead of a stored site")
        parser.add_argument(
            "--out", help="folder to write into (default: var/plots/ of the project's data)"
        )
        parser.add_argument("--format", choices=("png", "svg"), default="png", dest="fmt")

    def handle(self, *args, targets: list[str], file: str | None, out: str | None, fmt: str, **o):
        site, names = split_targets(targets, file=file, what="ct")
        ct = names[0]
        doc = load_document(site=site, file=file)
        require(doc, "ct", ct)
        images = ct_plots(doc, ct, fmt)
        folder = Path(out) if out else default_folder()
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(f"cannot make the output folder {folder}: {exc}") from exc
        root = folder.resolve()
        stem = f"{safe_name(str(doc['site']['code']))}_{safe_name(ct)}"
        for name, data in images.items():
            path = folder / f"{stem}_{safe_name(name)}.{fmt}"
            if path.resolve().parent != root:  # a guard behind safe_name, never expected
                raise InputError(f"refusing to write {path}: outside {folder}")
            path.write_bytes(data)
            self.stdout.write(str(path))
