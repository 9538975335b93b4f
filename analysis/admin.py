"""Admin views of the analysis: runs and the outbox to watch the jobs, and the results (read
only: they are replaced by every recompute)."""

from __future__ import annotations

from django.contrib import admin

from analysis import models


class ReadOnlyAdmin(admin.ModelAdmin):
    list_per_page = 100

    def has_add_permission(self, request) -> bool:
        return False

    def has_change_permission(self, request, obj=None) -> bool:
        return False


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
        "created_at",
        "finished_at",
    )
    list_filter = ("status", "kind")
    readonly_fields = [f.name for f in models.AnalysisRun._meta.fields]


@admin.register(models.RecomputeRequest)
class RecomputeRequestAdmin(ReadOnlyAdmin):
    list_display = ("id", "site", "revision", "status", "sends", "created_at", "done_at", "run")
    list_filter = ("status",)
    list_select_related = ("site", "run")


@admin.register(models.SiteComputation)
class SiteComputationAdmin(ReadOnlyAdmin):
    list_display = ("site_code", "revision", "computed_at", "cts", "findings", "dangers")
    search_fields = ("site_code",)


@admin.register(models.Finding)
class FindingAdmin(ReadOnlyAdmin):
    list_display = ("site_code", "severity", "code", "ct", "device", "procedure", "step")
    list_filter = ("severity", "code")
    search_fields = ("site_code", "ct", "device", "procedure")


@admin.register(models.ProcedureVerdict)
class ProcedureVerdictAdmin(ReadOnlyAdmin):
    list_display = ("site_code", "procedure", "safe", "revision", "computed_at")
    list_filter = ("safe",)
    search_fields = ("site_code", "procedure")
