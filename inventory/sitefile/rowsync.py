"""Bring the rows of one model in line with the rows a site file wants, with history.

The importer describes each section as wanted rows (plain dicts of column values) under a
natural key; :class:`RowSync` compares them with the stored rows (read as dicts, never as model
instances), updates in place what changed, creates what is new and deletes what is gone, and
records a django-simple-history row for every row it writes. Counts go to the import result.

New rows are most of a fleet import, so :class:`NewRows` writes them without model instances:
on PostgreSQL with ids from the sequences and ``COPY``; elsewhere (SQLite, the embedded default)
``bulk_create`` returns the ids. Their history rows are what simple-history's own bulk helper
writes (``+``, one time per table, the given user or the request's), copied by the database
from the new rows. Updates are rare and few, and use that helper;
deletes go through the ORM so that its signals record them.
"""

from __future__ import annotations

import json
import operator
from collections import Counter
from collections.abc import Callable, Hashable, Iterable
from typing import Any

from django.db import connection
from django.db import models as djm
from django.utils import timezone
from simple_history.models import HistoricalRecords
from simple_history.utils import bulk_update_with_history

Row = dict[str, Any]


def columns(model: type[djm.Model]) -> list[str]:
    """The attribute names of a model's concrete fields (``site_id``, not ``site``)."""
    return [f.attname for f in model._meta.concrete_fields]


def stored(model: type[djm.Model], **where: Any) -> list[Row]:
    """The stored rows of ``model`` matching ``where``, as dicts in primary-key order."""
    return list(model.objects.filter(**where).order_by("pk").values(*columns(model)))


def numbered(pairs: Iterable[tuple]) -> list[tuple]:
    """Keys for rows that have no code (wires, links, contacts): the terminals they join plus a
    running count, so two parallel wires between the same points stay two rows."""
    seen: Counter = Counter()
    keys = []
    for pair in pairs:
        seen[pair] += 1
        keys.append((*pair, seen[pair]))
    return keys


# Field types whose Python value the database driver cannot take as it is.
_PREPARED = frozenset({"JSONField", "DateTimeField", "DateField", "DecimalField", "UUIDField"})


def fields(model: type[djm.Model]) -> list[djm.Field]:
    """A model's concrete fields but its primary key, in column order."""
    return [f for f in model._meta.concrete_fields if not f.primary_key]


def _preparers(model: type[djm.Model]) -> list[Callable[[Any], Any] | None]:
    """Per column (primary key first), how a value is made ready for the driver, if it must."""

    def prep(f: djm.Field) -> Callable[[Any], Any]:
        return lambda value: f.get_db_prep_save(value, connection)

    def as_json(f: djm.JSONField) -> Callable[[Any], Any]:
        # COPY sends text, which the server reads with the column's type: JSON text is all
        # a json column needs, without a round through the driver's adapter per value.
        encoder = f.encoder
        return lambda value: None if value is None else json.dumps(value, cls=encoder)

    return [
        as_json(f)
        if isinstance(f, djm.JSONField)
        else prep(f)
        if f.get_internal_type() in _PREPARED
        else None
        for f in (model._meta.pk, *fields(model))
    ]


def _prepared(values: list[tuple], preparers: list[Callable[[Any], Any] | None]) -> list[tuple]:
    active = [(i, p) for i, p in enumerate(preparers) if p is not None]
    if not active:
        return values
    out = []
    for row in values:
        row = list(row)
        for i, p in active:
            row[i] = p(row[i])
        out.append(tuple(row))
    return out


def _history_user_id(user: Any) -> Any:
    """The user simple-history would record: the one given, else the request's (set by its
    middleware), else none."""
    if user is None:
        request = getattr(HistoricalRecords.context, "request", None)
        user = getattr(request, "user", None)
    if user is None or not getattr(user, "is_authenticated", False):
        return None
    return user.pk


def _quote(name: str) -> str:
    return connection.ops.quote_name(name)


def _copy(table: str, names: list[str], values: list[tuple]) -> None:
    sql = f"COPY {_quote(table)} ({', '.join(_quote(n) for n in names)}) FROM STDIN"
    with connection.cursor() as cursor, cursor.cursor.copy(sql) as copy:
        for row in values:
            copy.write_row(row)


class NewRows:
    """Inserts the new rows of one import (one site, or a chunk of sites in one transaction)
    and their ``+`` history rows.

    Round trips and statements are what a loaded server makes expensive, so on PostgreSQL ids
    for several tables come from their sequences in one query (:meth:`reserve`, when the counts
    are known ahead; unused ids are only a gap in a sequence) and the rows wait in memory, by
    table, for :meth:`flush`: one ``COPY`` per table for everything the import inserted, then
    the history rows, copied by the database from the rows themselves (the values never travel
    twice), in one batch of statements. Nothing reads a new row back before the flush (the
    importer reads the stored rows of a table before it writes any), and the foreign keys are
    checked at commit, so the order of the tables does not matter. Elsewhere (SQLite, the
    embedded default) ``bulk_create`` writes the rows at once and returns their ids.
    """

    def __init__(self, user: Any) -> None:
        self.postgres = connection.vendor == "postgresql"
        self.user_id = _history_user_id(user)
        self.reserved: dict[type[djm.Model], list[int]] = {}
        # Model -> rows waiting for the COPY (prepared values, primary key first), and the ids
        # of the rows written or waiting whose history rows are still to write.
        self.rows: dict[type[djm.Model], list[tuple]] = {}
        self.ids: dict[type[djm.Model], list[int]] = {}

    def reserve(self, counts: dict[type[djm.Model], int]) -> None:
        """Take ids for the given numbers of new rows per model, in one query (PostgreSQL)."""
        counts = {m: n for m, n in counts.items() if n > 0}
        if not self.postgres or not counts:
            return
        # The sequence is looked up once per table: ``OFFSET 0`` keeps the planner from
        # pulling the lookup into the series, where it would run once per value (ten times
        # the cost of the ids themselves).
        arrays = ", ".join(
            "ARRAY(SELECT nextval(q.seq) FROM (SELECT pg_get_serial_sequence(%s, %s)::regclass"
            " AS seq OFFSET 0) q, generate_series(1, %s))"
            for _ in counts
        )
        params = [
            v
            for model, n in counts.items()
            for v in (_quote(model._meta.db_table), model._meta.pk.column, n)
        ]
        with connection.cursor() as cursor:
            cursor.execute(f"SELECT {arrays}", params)
            for model, ids in zip(counts, cursor.fetchone(), strict=True):
                self.reserved.setdefault(model, []).extend(ids)

    def _ids(self, model: type[djm.Model], n: int) -> list[int]:
        pool = self.reserved.get(model, [])
        if len(pool) < n:
            self.reserve({model: n - len(pool)})
            pool = self.reserved[model]
        ids, self.reserved[model] = pool[:n], pool[n:]
        return ids

    def insert(self, model: type[djm.Model], rows: list[Row]) -> list[int]:
        """Insert ``rows`` (column attname -> value, no primary key); their new primary keys,
        in order. On PostgreSQL the rows are written by :meth:`flush`; their history rows are,
        everywhere."""
        if not rows:
            return []
        if self.postgres:
            ids = self._ids(model, len(rows))
            take = operator.itemgetter(*(f.attname for f in fields(model)))
            if len(fields(model)) == 1:
                values = [(i, take(row)) for i, row in zip(ids, rows, strict=True)]
            else:
                values = [(i, *take(row)) for i, row in zip(ids, rows, strict=True)]
            self.rows.setdefault(model, []).extend(_prepared(values, _preparers(model)))
        else:
            created = model.objects.bulk_create([model(**row) for row in rows])
            ids = [row.pk for row in created]
            if ids and ids[0] is None:
                raise RuntimeError(f"bulk create of {model.__name__} returned no primary keys")
        self.ids.setdefault(model, []).extend(ids)
        return ids

    def _history(self, model: type[djm.Model], ids: list[int], stamp: Any) -> tuple[str, list]:
        history = model.history.model
        columns = [history._meta.get_field(f.name).column for f in fields(model)]
        if self.postgres:  # the ids as one array literal (the driver's list adapter is slow)
            chosen, id_list = "= ANY(%s::bigint[])", "{" + ",".join(map(str, ids)) + "}"
        else:  # SQLite: the ids as one JSON array parameter, read back by json_each
            chosen, id_list = "IN (SELECT value FROM json_each(%s))", json.dumps(ids)
        pk = _quote(model._meta.pk.column)
        names = ", ".join(_quote(c) for c in columns)
        sql = (
            f"INSERT INTO {_quote(history._meta.db_table)} ({pk}, {names}, history_date, "
            "history_change_reason, history_type, history_user_id) "
            f"SELECT {pk}, {names}, %s, NULL, '+', %s FROM {_quote(model._meta.db_table)} "
            f"WHERE {pk} {chosen} ORDER BY {pk}"
        )
        return sql, [stamp, self.user_id, id_list]

    def flush(self) -> None:
        """Write the rows waiting (PostgreSQL) and the history rows of everything inserted
        so far: one COPY per table, then one statement per table for the history."""
        for model, values in self.rows.items():
            pk = model._meta.pk
            _copy(model._meta.db_table, [pk.column, *(f.column for f in fields(model))], values)
        self.rows = {}
        if not self.ids:
            return
        # One time for the history rows of one flush, as simple-history's bulk helper does.
        stamp = timezone.now()
        pending = [self._history(model, ids, stamp) for model, ids in self.ids.items()]
        self.ids = {}
        with connection.cursor() as cursor:
            # One round trip: Django's default client-side binding on psycopg 3 takes several
            # statements in one execute (server-side binding does not).
            options = connection.settings_dict.get("OPTIONS", {})
            if self.postgres and not options.get("server_side_binding"):
                cursor.execute(
                    ";\n".join(sql for sql, _ in pending),
                    [p for _, params in pending for p in params],
                )
            else:
                for sql, params in pending:
                    cursor.execute(sql, params)


class RowSync:
    """Syncs rows model by model for one import, counting into ``created``/``updated``/
    ``deleted`` (keyed by the model's plural name)."""

    def __init__(
        self,
        *,
        user: Any,
        created: Counter,
        updated: Counter,
        deleted: Counter,
        new: NewRows | None = None,
    ):
        self.user = user
        self.created = created
        self.updated = updated
        self.deleted = deleted
        # Model -> ids of stored rows the document dropped, when their deletion waits.
        self.gone: dict[type[djm.Model], list[int]] = {}
        # Shared by the sites of one chunk (``inventory.services.sites_import``), else its own.
        self.new = NewRows(user) if new is None else new

    def create(self, model: type[djm.Model], rows: list[Row]) -> list[int]:
        """Insert rows known to be new (nothing is stored to compare with); their ids."""
        ids = self.new.insert(model, rows)
        if ids:
            self.created[str(model._meta.verbose_name_plural)] += len(ids)
        return ids

    def __call__(
        self,
        model: type[djm.Model],
        existing: Iterable[Row],
        wanted: dict[Hashable, Row],
        key: Callable[[Row], Hashable],
        *,
        delete: bool = True,
    ) -> dict[Hashable, int]:
        """Sync and return natural key -> primary key of every row kept or created. Without
        ``delete``, the ids of dropped rows wait in ``gone`` for the caller to delete them."""
        name = str(model._meta.verbose_name_plural)
        current = {key(row): row for row in existing}
        to_update: list[djm.Model] = []
        fields: set[str] = set()
        for k, values in wanted.items():
            row = current.get(k)
            if row is None:
                continue
            changed = [f for f, v in values.items() if row[f] != v]
            if changed:
                instance = model(**{**row, **values})
                fields.update(changed)
                to_update.append(instance)
        ids = {k: row["id"] for k, row in current.items() if k in wanted}
        if to_update:
            bulk_update_with_history(
                to_update, model, sorted(fields), batch_size=2000, default_user=self.user
            )
            self.updated[name] += len(to_update)
        new_keys = [k for k in wanted if k not in current]
        if new_keys:
            new_ids = self.new.insert(model, [wanted[k] for k in new_keys])
            self.created[name] += len(new_ids)
            ids.update(zip(new_keys, new_ids, strict=True))
        gone = [k for k in current if k not in wanted]
        if delete and gone:
            model.objects.filter(pk__in=[current[k]["id"] for k in gone]).delete()
            self.deleted[name] += len(gone)
        elif gone:
            self.gone[model] = [current[k]["id"] for k in gone]
        return ids
