"""The results writer: the bulk replacement of a site's stored results.

In the caller's transaction it locks the site rows, refuses to replace newer results with older
ones, swaps the site's result rows (COPY on PostgreSQL, ``bulk_create`` elsewhere) and marks
the outbox rows the stored results satisfy done.
"""

from __future__ import annotations

import datetime as dt
import json
import operator
from collections.abc import Mapping
from typing import Any

from django.db import connection
from django.db import models as djm
from django.utils import timezone

from analysis import models
from inventory.changes import changes_done
from inventory.models import Site

# Replaced as one block per site, in this order (members before circuits only for tidiness:
# there are no foreign keys between result tables).
RESULT_MODELS: tuple[type[djm.Model], ...] = (
    models.CTRating,
    models.CTReport,
    models.Finding,
    models.ProcedureVerdict,
    models.CircuitMember,
    models.Circuit,
    models.SiteComputation,
)


def results_replace(
    *, heads: Mapping[int, tuple[str, int]], results: Mapping[int, Any], run_id: int | None
) -> tuple[list[int], list[int]]:
    """Replace the stored results of the given sites, in the caller's transaction.

    ``heads`` gives each site's (code, revision) as read *before* its record; ``results`` the
    engine's ``SiteResults`` per site. The site rows are locked (``select_for_update``; a
    no-op on SQLite, whose writers are serialised anyway) so two writers of one site take
    turns, and a site whose stored results are already newer is left alone. Outbox rows the
    stored results satisfy are marked done. Returns (written site ids, skipped as newer).
    """
    ids = sorted(heads)
    if not ids:
        return [], []
    list(Site.objects.select_for_update().filter(pk__in=ids).order_by("pk").values_list("pk"))
    stored = dict(
        models.SiteComputation.objects.filter(site_id__in=ids).values_list("site_id", "revision")
    )
    written = [s for s in ids if s in results and stored.get(s, 0) <= heads[s][1]]
    newer = [s for s in ids if s in results and stored.get(s, 0) > heads[s][1]]
    if written:
        for model in RESULT_MODELS:
            model._default_manager.filter(site_id__in=written).delete()
        now = timezone.now()
        rows = _result_rows({s: results[s] for s in written}, heads, now, run_id)
        for model in RESULT_MODELS:
            _insert(model, rows[model])
    # Every pending change of these sites at or below the revision now stored is satisfied.
    at = {**stored, **{s: heads[s][1] for s in written}}
    changes_done(at={s: at[s] for s in ids if s in at})
    return written, newer


def _result_rows(
    results: Mapping[int, Any],
    heads: Mapping[int, tuple[str, int]],
    now: dt.datetime,
    run_id: int | None,
) -> dict[type[djm.Model], list[dict[str, Any]]]:
    rows: dict[type[djm.Model], list[dict[str, Any]]] = {m: [] for m in RESULT_MODELS}
    for sid, r in results.items():
        code, revision = heads[sid]
        common = {
            "site_id": sid,
            "site_code": code,
            "revision": revision,
            "computed_at": now,
            "run_id": run_id,
        }
        rows[models.CTRating] += [{**common, **case} for case in r.ct_cases]
        rows[models.CTReport] += [
            {**common, "ct": rep["ct"], "report": rep["report"]} for rep in r.ct_reports
        ]
        rows[models.Finding] += [
            {
                **common,
                **{
                    k: f.get(k)
                    for k in ("ct", "device", "input", "circuit", "procedure", "step", "stage")
                },
                "code": f["code"],
                "severity": f["severity"],
                "message": f["message"],
                "numbers": f.get("numbers") or {},
            }
            for f in r.findings
        ]
        rows[models.ProcedureVerdict] += [
            {
                **common,
                "procedure": v["procedure"],
                "safe": bool(v["safe"]),
                "first_danger": v.get("first_danger"),
                "verdict": v["verdict"],
            }
            for v in r.verdicts
        ]
        for c in r.circuits:
            rows[models.Circuit].append(
                {**common, "key": c["key"], "ground_points": int(c["ground_points"])}
            )
            members = {("ct", code) for code in c["cts"]} | {
                ("device", code) for code in c["devices"]
            }
            rows[models.CircuitMember] += [
                {**common, "circuit_key": c["key"], "kind": kind, "code": member}
                for kind, member in sorted(members)
            ]
        dangers = sum(1 for f in r.findings if f["severity"] == "danger")
        rows[models.SiteComputation].append(
            {
                **common,
                "cts": len(r.ct_reports),
                "findings": len(r.findings),
                "dangers": dangers,
                "verdicts": len(r.verdicts),
                "unsafe_procedures": sum(1 for v in r.verdicts if not v["safe"]),
                "circuits": len(r.circuits),
            }
        )
    return rows


def _columns(model: type[djm.Model]) -> list[djm.Field]:
    return [f for f in model._meta.concrete_fields if not f.primary_key]


def _insert(model: type[djm.Model], rows: list[dict[str, Any]], *, table: str = "") -> None:
    """Insert rows: one COPY on PostgreSQL (psycopg 3), ``bulk_create`` elsewhere. ``table``
    overrides the model's table (PostgreSQL only; the benchmark copies into a twin)."""
    if not rows:
        return
    fields = _columns(model)
    if connection.vendor == "postgresql":
        names = ", ".join(connection.ops.quote_name(f.column) for f in fields)
        table = connection.ops.quote_name(table or model._meta.db_table)
        # COPY goes to psycopg directly: wrap its errors as Django's, so a lost connection is
        # a django.db.OperationalError (retried) and the connection is known to be broken.
        attnames = [f.attname for f in fields]
        json_at = [i for i, f in enumerate(fields) if isinstance(f, djm.JSONField)]
        pick = operator.itemgetter(*attnames)
        dumps = json.dumps
        with (
            connection.wrap_database_errors,
            connection.cursor() as cursor,
            cursor.copy(f"COPY {table} ({names}) FROM STDIN") as copy,
        ):
            write = copy.write_row
            for row in rows:
                values = list(pick(row))
                for i in json_at:
                    values[i] = dumps(values[i])
                write(values)
    else:
        model._default_manager.bulk_create([model(**row) for row in rows], batch_size=500)
