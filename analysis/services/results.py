"""The results writer: the bulk replacement of a site's stored results.

In the caller's transaction it locks the site rows, refuses to replace newer results with older
ones, swaps the site's result rows (COPY on PostgreSQL, ``bulk_create`` elsewhere) and marks
the outbox rows the stored results satisfy done.
"""

from __future__ import annotations

import datetime as dt
import itertools
import json
import logging
import math
import operator
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from django.db import InterfaceError, OperationalError, connection, transaction
from django.db import models as djm
from django.utils import timezone
from psycopg.types.json import Jsonb

from analysis import models
from analysis.compute import CASE_VALUES
from analysis.engine.findings import DANGER
from inventory.changes import changes_done
from inventory.models import Site

log = logging.getLogger(__name__)

# The finding recorded for a site whose results could not be computed or written (danger: the
# site's verdicts are unknown). Raised here, not by the engine.
RESULTS_NOT_COMPUTED = "results_not_computed"

# Errors of the connection, not of one site's rows: the chunk is retried as a whole.
TRANSIENT_DB_ERRORS: tuple[type[BaseException], ...] = (OperationalError, InterfaceError)

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


@dataclass
class WriteOutcome:
    """What the results writer did with each site it was given."""

    written: list[int] = field(default_factory=list)
    newer: list[int] = field(default_factory=list)  # stored results already newer: left alone
    failed: dict[int, str] = field(default_factory=dict)  # recorded as failures, with why


def results_replace(
    *,
    heads: Mapping[int, tuple[str, int]],
    results: Mapping[int, Any],
    run_id: int | None,
    failed: Mapping[int, str] | None = None,
) -> WriteOutcome:
    """Replace the stored results of the given sites, in the caller's transaction.

    ``heads`` gives each site's (code, revision) as read *before* its record; ``results`` the
    engine's ``SiteResults`` per site; ``failed`` the sites the engine (or the read) could not
    handle, with why. The site rows are locked (``select_for_update``; a no-op on SQLite, whose
    writers are serialised anyway) so two writers of one site take turns, and a site whose
    stored results are already newer is left alone.

    The sites are written in one savepoint; when anything is refused (a number JSON cannot
    hold, a value too long) it is rolled back and each site is written in its own savepoint, so
    a refused site is rolled back alone and, like a site the engine failed on, recorded as a
    failure at its revision (:func:`_record_failure`): the other sites of the chunk are
    written and nothing is left pending unseen. Errors of the
    connection itself (``OperationalError``) propagate: the whole chunk is retried. Outbox rows
    the stored results (or failures) satisfy are marked done.
    """
    out = WriteOutcome()
    ids = sorted(heads)
    if not ids:
        return out
    failures = dict(failed or {})
    list(Site.objects.select_for_update().filter(pk__in=ids).order_by("pk").values_list("pk"))
    stored = dict(
        models.SiteComputation.objects.filter(site_id__in=ids).values_list("site_id", "revision")
    )
    now = timezone.now()
    out.newer = [s for s in ids if s in {**results, **failures} and stored.get(s, 0) > heads[s][1]]
    todo = [s for s in ids if s in results and s not in out.newer]
    # The common case first: every site of the chunk in one savepoint (one DELETE and one COPY
    # per table for the chunk). Only when the database refuses something is it rolled back and
    # each site written in its own savepoint, so the refused site is the only one to fail.
    if len(todo) > 1 and _try_write({s: results[s] for s in todo}, heads, now, run_id) is None:
        out.written = todo
    else:
        if len(todo) > 1:
            log.warning("results of sites %s refused together: writing them one by one", todo)
        for sid in todo:
            exc = _try_write({sid: results[sid]}, heads, now, run_id)
            if exc is None:
                out.written.append(sid)
                continue
            code = heads[sid][0]
            log.error("results of site %s could not be written", code, exc_info=exc)
            failures[sid] = f"site {code}: writing: {type(exc).__name__}: {exc}"
    for sid in ids:
        if sid in failures and sid not in out.newer:
            with transaction.atomic():
                _record_failure(sid, failures[sid], heads, now, run_id)
            out.failed[sid] = failures[sid]
    # Every pending change of these sites at or below the revision now stored is satisfied.
    at = {**stored, **{s: heads[s][1] for s in [*out.written, *out.failed]}}
    changes_done(at={s: at[s] for s in ids if s in at})
    return out


def _try_write(
    results: Mapping[int, Any],
    heads: Mapping[int, tuple[str, int]],
    now: dt.datetime,
    run_id: int | None,
) -> Exception | None:
    """Write these sites in one savepoint: None when written, else what refused them (and the
    savepoint is rolled back). Connection errors propagate."""
    try:
        with transaction.atomic():
            _write_sites(results, heads, now, run_id)
    except TRANSIENT_DB_ERRORS:
        raise
    except Exception as exc:
        if connection.needs_rollback:  # the savepoint itself could not be rolled back
            raise
        return exc
    return None


def _write_sites(
    results: Mapping[int, Any],
    heads: Mapping[int, tuple[str, int]],
    now: dt.datetime,
    run_id: int | None,
) -> None:
    """Swap the stored result rows of these sites for the new ones."""
    ids = list(results)
    for model in RESULT_MODELS:
        model._default_manager.filter(site_id__in=ids).delete()
    rows = _result_rows(results, heads, now, run_id)
    for model in RESULT_MODELS:
        _insert(model, rows[model])


def _record_failure(
    sid: int, error: str, heads: Mapping[int, tuple[str, int]], now: dt.datetime, run_id: int | None
) -> None:
    """The site's results at its revision could not be computed or written: its computation row
    says so (``failed``, with the error) at that revision, and one danger finding
    ``results_not_computed`` shows it in the findings list. The results stored before stay,
    labelled stale by their older revision; the next edit (or a forced run) tries again."""
    code, revision = heads[sid]
    common = {
        "site_id": sid,
        "site_code": code,
        "revision": revision,
        "computed_at": now,
        "run_id": run_id,
    }
    models.SiteComputation.objects.filter(site_id=sid).delete()
    models.Finding.objects.filter(site_id=sid, code=RESULTS_NOT_COMPUTED).delete()
    models.SiteComputation.objects.create(
        **common,
        status=models.ComputationStatus.FAILED,
        error=error[:4000],
        findings=1,
        dangers=1,
    )
    models.Finding.objects.create(
        **common,
        code=RESULTS_NOT_COMPUTED,
        severity=DANGER,
        message=f"results could not be computed: {error}"[:4000],
    )


# The columns every result table starts with (``_columns`` checks it), then each table's own.
COMMON_COLUMNS = ("site_id", "site_code", "revision", "computed_at", "run_id")
CT_CASE_COLUMNS = ("ct", "case", "burden_r_ohm", "burden_x_ohm", "burden_z_ohm", *CASE_VALUES)
FINDING_NAMES = ("ct", "device", "input", "circuit", "procedure", "step", "stage")

Row = tuple[Any, ...]


def _result_rows(
    results: Mapping[int, Any],
    heads: Mapping[int, tuple[str, int]],
    now: dt.datetime,
    run_id: int | None,
) -> dict[type[djm.Model], list[Row]]:
    """The rows of every result table for these sites, as tuples in the order of the table's
    columns (:func:`_columns`): the common ones (site, code, revision, when, run), then the
    table's own."""
    rows: dict[type[djm.Model], list[Row]] = {m: [] for m in RESULT_MODELS}
    ratings, reports, findings = rows[models.CTRating], rows[models.CTReport], rows[models.Finding]
    verdicts, circuits = rows[models.ProcedureVerdict], rows[models.Circuit]
    members, computations = rows[models.CircuitMember], rows[models.SiteComputation]
    case_values = operator.itemgetter(*CT_CASE_COLUMNS)
    for sid, r in results.items():
        code, revision = heads[sid]
        common = (sid, code, revision, now, run_id)
        ratings += [common + case_values(case) for case in r.ct_cases]
        reports += [(*common, rep["ct"], rep["report"]) for rep in r.ct_reports]
        dangers = 0
        for f in r.findings:
            findings.append(
                (
                    *common,
                    f["code"],
                    f["severity"],
                    *map(f.get, FINDING_NAMES),
                    f["message"],
                    f.get("numbers") or {},
                )
            )
            dangers += f["severity"] == "danger"
        unsafe = 0
        for v in r.verdicts:
            safe = bool(v["safe"])
            verdicts.append((*common, v["procedure"], safe, v.get("first_danger"), v["verdict"]))
            unsafe += not safe
        for c in r.circuits:
            key = c["key"]
            circuits.append((*common, key, int(c["ground_points"])))
            in_circuit = {("ct", ct) for ct in c["cts"]} | {("device", d) for d in c["devices"]}
            members += [(*common, key, kind, member) for kind, member in sorted(in_circuit)]
        counts = (len(r.ct_reports), len(r.findings), dangers, len(r.verdicts), unsafe)
        status = (models.ComputationStatus.OK, "")
        computations.append((*common, *status, *counts, len(r.circuits)))
    return rows


def _columns(model: type[djm.Model]) -> list[djm.Field]:
    fields = [f for f in model._meta.concrete_fields if not f.primary_key]
    if tuple(f.attname for f in fields[: len(COMMON_COLUMNS)]) != COMMON_COLUMNS:
        raise TypeError(f"{model.__name__}: a result table starts with {COMMON_COLUMNS}")
    return fields


def _insert(model: type[djm.Model], rows: list[Row], *, table: str = "") -> None:
    """Insert rows (tuples in the order of :func:`_columns`): one COPY on PostgreSQL
    (psycopg 3), ``bulk_create`` elsewhere. ``table`` overrides the model's table (PostgreSQL
    only; the benchmark copies into a twin).

    Stored results are served as JSON, which has no infinity or NaN: a non-finite number in a
    float column or a JSON document raises ``ValueError`` (on every database alike), and the
    writer records that site as a failure."""
    if not rows:
        return
    fields = _columns(model)
    float_at = [i for i, f in enumerate(fields) if isinstance(f, djm.FloatField)]
    if float_at:
        _check_finite(model, rows, fields, float_at)
    attnames = [f.attname for f in fields]
    json_at = [i for i, f in enumerate(fields) if isinstance(f, djm.JSONField)]
    if connection.vendor == "postgresql":
        names = ", ".join(connection.ops.quote_name(f.column) for f in fields)
        table = table or model._meta.db_table
        # COPY goes to psycopg directly: wrap its errors as Django's, so a lost connection is
        # a django.db.OperationalError (retried) and the connection is known to be broken.
        with connection.wrap_database_errors, connection.cursor() as cursor:
            types = _column_types(cursor, table, fields)
            sql = f"COPY {connection.ops.quote_name(table)} ({names}) FROM STDIN (FORMAT BINARY)"
            with cursor.copy(sql) as copy:
                # Binary: no number or timestamp goes through text on either side (floats
                # travel as their 8 bytes, so a value is stored exactly as computed).
                copy.set_types(types)
                write = copy.write_row
                if not json_at:
                    for row in rows:
                        write(row)
                else:
                    for row in rows:
                        values = list(row)
                        for i in json_at:
                            values[i] = Jsonb(_dumps(model, attnames[i], values[i]), _as_is)
                        write(values)
    else:
        for row in rows:
            for i in json_at:
                _dumps(model, attnames[i], row[i])
        model._default_manager.bulk_create(
            [model(**dict(zip(attnames, row, strict=True))) for row in rows], batch_size=500
        )


# Standard JSON, compact (the column is jsonb: the separators are not stored), refusing
# ``Infinity`` and ``NaN`` with ``ValueError``; one encoder for every value.
_encode = json.JSONEncoder(allow_nan=False, check_circular=False, separators=(",", ":")).encode


def _dumps(model: type[djm.Model], name: str, value: Any) -> str:
    """Standard JSON (``Infinity`` and ``NaN`` refused with ``ValueError`` naming the column)."""
    try:
        return _encode(value)
    except ValueError:
        raise ValueError(
            f"{model._meta.model_name}.{name} holds a number that is not a finite number "
            "(infinity or NaN: JSON cannot hold it)"
        ) from None


def _as_is(text: str) -> str:
    """The JSON text a value was already encoded to (by :func:`_dumps`)."""
    return text


def _column_types(cursor: Any, table: str, fields: list[djm.Field]) -> list[int]:
    """The type oid of each field's column, from the catalog (what a binary COPY sends)."""
    cursor.execute(
        "SELECT attname, atttypid FROM pg_attribute "
        "WHERE attrelid = %s::regclass AND attnum > 0 AND NOT attisdropped",
        [connection.ops.quote_name(table)],
    )
    oids = dict(cursor.fetchall())
    return [int(oids[f.column]) for f in fields]


def _check_finite(
    model: type[djm.Model], rows: list[Row], fields: list[djm.Field], at: list[int]
) -> None:
    """Raise ``ValueError`` naming the column when a float column of ``rows`` holds infinity
    or NaN. All rows at once (None and 0 left out, both fine); the row is looked for only when
    one is found."""
    isfinite = math.isfinite
    pick = operator.itemgetter(*at) if len(at) > 1 else lambda row: (row[at[0]],)
    if all(map(isfinite, filter(None, itertools.chain.from_iterable(map(pick, rows))))):
        return
    for row in rows:
        for i in at:
            value = row[i]
            if value is not None and not isfinite(value):
                raise ValueError(
                    f"{model._meta.model_name}.{fields[i].attname} is {value} (not a finite number)"
                )
