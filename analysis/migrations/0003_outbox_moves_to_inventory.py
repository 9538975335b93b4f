"""The recompute outbox moves to the inventory, which owns the change it records.

``analysis.RecomputeRequest`` rows are copied, ids, times and delivery state kept, into the new
``inventory.SiteChange`` table; the run each request pointed to now points back at its change
(``AnalysisRun.change``, the newest request of a run when several shared one). Then the old
table is dropped. Reversible: going back moves the rows the other way.
"""

import django.db.models.deletion
from django.core.management.color import no_style
from django.db import migrations, models

COLUMNS = "id, site_id, revision, status, sends, created_at, sent_at, done_at"


def _reset_sequence(schema_editor, model) -> None:
    connection = schema_editor.connection
    with connection.cursor() as cursor:
        for sql in connection.ops.sequence_reset_sql(no_style(), [model]):
            cursor.execute(sql)


def requests_to_changes(apps, schema_editor) -> None:
    request = apps.get_model("analysis", "RecomputeRequest")._meta.db_table
    run = apps.get_model("analysis", "AnalysisRun")._meta.db_table
    change_model = apps.get_model("inventory", "SiteChange")
    change = change_model._meta.db_table
    with schema_editor.connection.cursor() as cursor:
        cursor.execute(
            f"INSERT INTO {change} ({COLUMNS}) SELECT {COLUMNS} FROM {request} ORDER BY id"
        )
        cursor.execute(
            f"UPDATE {run} SET change_id = "
            f"(SELECT MAX(r.id) FROM {request} r WHERE r.run_id = {run}.id) "
            f"WHERE EXISTS (SELECT 1 FROM {request} r WHERE r.run_id = {run}.id)"
        )
    _reset_sequence(schema_editor, change_model)


def changes_to_requests(apps, schema_editor) -> None:
    request_model = apps.get_model("analysis", "RecomputeRequest")
    request = request_model._meta.db_table
    run = apps.get_model("analysis", "AnalysisRun")._meta.db_table
    change = apps.get_model("inventory", "SiteChange")._meta.db_table
    with schema_editor.connection.cursor() as cursor:
        cursor.execute(
            f"INSERT INTO {request} ({COLUMNS}, run_id) SELECT {COLUMNS}, "
            f"(SELECT MAX(a.id) FROM {run} a WHERE a.change_id = {change}.id) "
            f"FROM {change} ORDER BY id"
        )
        # The rows move back: none is left behind to be copied twice on the next migrate.
        cursor.execute(f"UPDATE {run} SET change_id = NULL")
        cursor.execute(f"DELETE FROM {change}")
    _reset_sequence(schema_editor, request_model)


class Migration(migrations.Migration):
    dependencies = [
        ("analysis", "0002_finding_stage"),
        ("inventory", "0004_site_change"),
    ]

    operations = [
        migrations.AddField(
            model_name="analysisrun",
            name="change",
            field=models.ForeignKey(
                blank=True,
                help_text="the record change (outbox row) this site run was sent for",
                null=True,
                on_delete=django.db.models.deletion.SET_NULL,
                related_name="+",
                to="inventory.sitechange",
            ),
        ),
        migrations.RunPython(requests_to_changes, changes_to_requests),
        migrations.DeleteModel(
            name="RecomputeRequest",
        ),
    ]
