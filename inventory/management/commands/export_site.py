"""``manage.py export_site SITE``: the site file of a stored site on stdout."""

from __future__ import annotations

import json

from django.core.management.base import BaseCommand, CommandError

from inventory.models import Site
from inventory.selectors import site_document


class Command(BaseCommand):
    help = "Write the loopkeep.site/1 document of a stored site to stdout."

    def add_arguments(self, parser) -> None:
        parser.add_argument("site", help="site code")

    def handle(self, *args, site: str, **options) -> None:
        try:
            record = Site.objects.get(code=site)
        except Site.DoesNotExist as exc:
            raise CommandError(f"no site with code {site!r}") from exc
        self.stdout.write(json.dumps(site_document(record), indent=2, ensure_ascii=False))
