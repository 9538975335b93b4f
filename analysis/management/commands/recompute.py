"""``recompute [--site SITE ...] [--wait] [--only-stale]``: recompute now, through the broker
when one is configured (in this process otherwise), printing the run's progress."""

from __future__ import annotations

import time

from django.core.management.base import BaseCommand, CommandError

from analysis import services
from analysis.models import AnalysisRun, RunKind, RunStatus
from analysis.sources import InputError, unknown
from config.celery import app
from inventory.models import Site


class Command(BaseCommand):
    help = "Recompute the results of some sites or of the whole fleet."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--site", action="append", default=[], help="site code (repeatable)")
        parser.add_argument(
            "--wait", action="store_true", help="with a broker: wait for the run, show progress"
        )
        parser.add_argument(
            "--only-stale",
            action="store_true",
            help="skip sites whose results are already at their current revision",
        )
        parser.add_argument("--timeout", type=float, default=3600.0, help="for --wait, seconds")

    def handle(
        self, *args, site: list[str], wait: bool, only_stale: bool, timeout: float, **options
    ) -> None:
        force = not only_stale
        if site:
            found = dict(Site.objects.filter(code__in=site).values_list("code", "pk"))
            missing = sorted(set(site) - set(found))
            if missing:
                codes = list(Site.objects.values_list("code", flat=True))
                raise InputError("; ".join(str(unknown("site", code, codes)) for code in missing))
            run = services.run_create(kind=RunKind.SITES, site_ids=found.values(), force=force)
            services.run_dispatch(run=run, on_commit=False)
        else:
            run = services.fleet_recompute(force=force, on_commit=False)
        eager = bool(app.conf.task_always_eager)
        if not eager and not wait:
            self.stdout.write(f"run {run.pk} sent to the broker (recompute --wait to follow it)")
            return
        run = AnalysisRun.objects.get(pk=run.pk) if eager else self._follow(run.pk, timeout)
        self.stdout.write(self._summary(run))
        if run.status != RunStatus.SUCCESS:
            raise CommandError(f"run {run.pk} {run.status}: {run.error.strip() or 'see the log'}")

    def _follow(self, run_id: int, timeout: float) -> AnalysisRun:
        deadline = time.monotonic() + timeout
        shown = None
        while True:
            run = AnalysisRun.objects.get(pk=run_id)
            progress = (run.status, run.sites_done, run.sites_total)
            if progress != shown:
                self.stdout.write(
                    f"run {run.pk} {run.status}: {run.sites_done}/{run.sites_total} sites"
                )
                shown = progress
            if run.status in (RunStatus.SUCCESS, RunStatus.FAILURE):
                return run
            if time.monotonic() > deadline:
                raise CommandError(f"run {run.pk} still {run.status} after {timeout:.0f} s")
            time.sleep(0.5)

    @staticmethod
    def _summary(run: AnalysisRun) -> str:
        took = f" in {run.duration_s:.1f} s" if run.duration_s is not None else ""
        return (
            f"run {run.pk} {run.status}{took}: {run.sites_done}/{run.sites_total} sites "
            f"({run.sites_skipped} already current, {run.sites_failed} failed), {run.cts} CTs, "
            f"{run.circuits} circuits, {run.findings} findings ({run.dangers} danger), "
            f"{run.verdicts} procedures ({run.unsafe_procedures} unsafe); read {run.read_s:.1f} s, "
            f"engine {run.compute_s:.1f} s, write {run.write_s:.1f} s"
        )
