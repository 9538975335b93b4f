"""The outbox moved from ``analysis.RecomputeRequest`` to ``inventory.SiteChange`` (migration
analysis 0003): existing rows keep their ids, revisions, delivery state and times, each run
points back at the newest change it was sent for, new rows continue the id sequence, and going
back moves the rows the other way with nothing left behind."""

from __future__ import annotations

import datetime as dt

import pytest
from django.db import connection
from django.db.migrations.executor import MigrationExecutor

from analysis.models import AnalysisRun
from inventory.models import SiteChange

BEFORE = [("analysis", "0002_finding_stage"), ("inventory", "0003_record_rules_and_labels")]
AFTER = [("analysis", "0003_outbox_moves_to_inventory")]
WHEN = dt.datetime(2026, 1, 2, 3, 4, 5, tzinfo=dt.UTC)


def _migrate(targets):
    executor = MigrationExecutor(connection)
    executor.migrate(targets)
    return MigrationExecutor(connection).loader.project_state(targets).apps


@pytest.mark.django_db(transaction=True)
def test_outbox_rows_move_to_the_inventory_and_back():
    latest = MigrationExecutor(connection).loader.graph.leaf_nodes()
    try:
        old = _migrate(BEFORE)
        site = old.get_model("inventory", "Site").objects.create(code="MIG", name="m", revision=3)
        run_model = old.get_model("analysis", "AnalysisRun")
        first = run_model.objects.create(kind="site", site_ids=[site.pk], sites_total=1)
        second = run_model.objects.create(kind="site", site_ids=[site.pk], sites_total=1)
        request = old.get_model("analysis", "RecomputeRequest").objects
        for pk, revision, run, status in (
            (10, 1, first, "done"),
            (11, 2, second, "pending"),
            (12, 3, second, "pending"),
            (13, 3, None, "failed"),
        ):
            request.create(pk=pk, site=site, revision=revision, run=run, status=status, sends=2)
        request.update(created_at=WHEN, sent_at=WHEN)

        _migrate(AFTER)
        rows = list(
            SiteChange.objects.order_by("pk").values_list(
                "pk", "site_id", "revision", "status", "sends", "created_at", "sent_at"
            )
        )
        assert rows == [
            (10, site.pk, 1, "done", 2, WHEN, WHEN),
            (11, site.pk, 2, "pending", 2, WHEN, WHEN),
            (12, site.pk, 3, "pending", 2, WHEN, WHEN),
            (13, site.pk, 3, "failed", 2, WHEN, WHEN),
        ]
        # A run shared by two requests points at the newer one (the sweep's choice too).
        runs = dict(AnalysisRun.objects.values_list("pk", "change_id"))
        assert runs == {first.pk: 10, second.pk: 12}
        assert SiteChange.objects.create(site_id=site.pk, revision=4).pk == 14

        back = _migrate(BEFORE)
        moved = back.get_model("analysis", "RecomputeRequest").objects.order_by("pk")
        assert list(moved.values_list("pk", "revision", "status", "run_id")) == [
            (10, 1, "done", first.pk),
            (11, 2, "pending", None),  # only the newest request of a run keeps the link
            (12, 3, "pending", second.pk),
            (13, 3, "failed", None),
            (14, 4, "pending", None),
        ]
        _migrate(AFTER)
        assert SiteChange.objects.count() == 5  # moved, not copied twice
    finally:
        _migrate(latest)
