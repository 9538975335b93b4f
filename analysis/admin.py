"""Admin views of the analysis: runs and the outbox to watch the jobs, and the computed results.

Everything here is read only: results are replaced by every recompute, so nobody adds, edits
or deletes a finding, a rating or a verdict by hand (a wrong result is fixed in the record, and
the recompute follows). Times are shown to the second and durations to the hundredth.
"""

from __future__ import annotations

import datetime as dt

from django.contrib import admin
from django.utils import timezone

from analysis import models
from inventory.models import SiteChange


def _when(value: dt.datetime | None) -> str:
    if value is None:
        return "—"
    return timezone.localtime(value).strftime("%Y-%m-%d %H:%M:%S")


def _seconds(value: float | None) -> str:
    return "—" if value is None else f"{value:.2f} s"


class ReadOnlyAdmin(admin.ModelAdmin):
    list_per_page = 100

    def has_add_permission(self, request) -> bool:
        return False

    def has_change_permission(self, request, obj=None) -> bool:
        return False

    def has_delete_permission(self, request, obj=None) -> bool:
        return False


class ResultAdmin(ReadOnlyAdmin):
    """A computed result: its site, the revision it was computed from, and when."""

    @admin.display(description="computed", ordering="computed_at")
    def computed(self, obj) -> str:
        return _when(obj.computed_at)


@admin.register(models.AnalysisRun)
class AnalysisRunAdmin(ReadOnlyAdmin):
    list_display = (
        "id",
        "kind",
        "status",
        "sites_done",
        "sites_total",
        "sites_failed",
        "findings",
        "dangers",
        "created",
        "duration",
    )
    list_filter = ("status", "kind")
    exclude = ("read_s", "compute_s", "write_s", "created_at", "started_at", "finished_at")
    readonly_fields = [
        f.name
        for f in models.AnalysisRun._meta.fields
        if f.name not in ("read_s", "compute_s", "write_s", "created_at", "started_at")
        and f.name not in ("finished_at", "progress_at")
    ] + ["created", "started", "finished", "duration", "read", "compute", "write"]

    @admin.display(description="created", ordering="created_at")
    def created(self, obj: models.AnalysisRun) -> str:
        return _when(obj.created_at)

    @admin.display(description="started")
    def started(self, obj: models.AnalysisRun) -> str:
        return _when(obj.started_at)

    @admin.display(description="finished")
    def finished(self, obj: models.AnalysisRun) -> str:
        return _when(obj.finished_at)

    @admin.display(description="duration")
    def duration(self, obj: models.AnalysisRun) -> str:
        return _seconds(obj.duration_s)

    @admin.display(description="reading the record")
    def read(self, obj: models.AnalysisRun) -> str:
        return _seconds(obj.read_s)

    @admin.display(description="in the engine")
    def compute(self, obj: models.AnalysisRun) -> str:
        return _seconds(obj.compute_s)

    @admin.display(description="writing results")
    def write(self, obj: models.AnalysisRun) -> str:
        return _seconds(obj.write_s)


@admin.register(SiteChange)
class SiteChangeAdmin(ReadOnlyAdmin):
    """The inventory's outbox, shown beside the runs that consume it."""

    list_display = ("id", "site", "revision", "status", "sends", "created", "done")
    list_filter = ("status",)
    list_select_related = ("site",)

    @admin.display(description="created", ordering="created_at")
    def created(self, obj: SiteChange) -> str:
        return _when(obj.created_at)

    @admin.display(description="done", ordering="done_at")
    def done(self, obj: SiteChange) -> str:
        return _when(obj.done_at)

    def has_delete_permission(self, request, obj=None) -> bool:
        # The outbox is job plumbing, not a result: a site deleted in the admin takes its
        # changes with it.
        return request.user.is_superuser


@admin.register(models.SiteComputation)
class SiteComputationAdmin(ResultAdmin):
    list_display = ("site_code", "revision", "status", "computed", "cts", "findings", "dangers")
    list_filter = ("status",)
    search_fields = ("site_code",)


@admin.register(models.Finding)
class FindingAdmin(ResultAdmin):
    list_display = (
        "site_code",
        "severity",
        "code",
        "ct",
        "device",
        "procedure",
        "step",
        "stage",
        "computed",
    )
    list_filter = ("severity", "code")
    search_fields = ("site_code", "ct", "device", "procedure")


@admin.register(models.ProcedureVerdict)
class ProcedureVerdictAdmin(ResultAdmin):
    list_display = ("site_code", "procedure", "safe", "revision", "computed")
    list_filter = ("safe",)
    search_fields = ("site_code", "procedure")
