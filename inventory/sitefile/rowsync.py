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


def _preparers(fields: list[djm.Field]) -> list[Callable[[Any], Any] | None]:
    def prep(f: djm.Field) -> Callable[[Any], Any]:
        return lambda value: f.get_db_prep_save(value, connection)

    return [prep(f) if f.get_internal_type() in _PREPARED else None for f in fields]


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
    """Inserts the new rows of one import and their ``+`` history rows.

    Round trips are what a loaded server makes expensive, so on PostgreSQL ids for several
    tables come from their sequences in one query (:meth:`reserve`, when the counts are known
    ahead; unused ids are only a gap in a sequence), the rows go in by one ``COPY`` per table,
    and the history rows, copied by the database from the rows themselves (the values never
    travel twice), wait for :meth:`flush` to go in one batch of statements.
    """

    def __init__(self, user: Any) -> None:
        self.postgres = connection.vendor == "postgresql"
        self.user_id = _history_user_id(user)
        self.reserved: dict[type[djm.Model], list[int]] = {}
        self.pending: list[tuple[str, list[Any]]] = []

    def reserve(self, counts: dict[type[djm.Model], int]) -> None:
        """Take ids for the given numbers of new rows per model, in one query (PostgreSQL)."""
        counts = {m: n for m, n in counts.items() if n > 0}
        if not self.postgres or not counts:
            return
        # The sequence is looked up once per table (in the lateral subquery), not per value.
        arrays = ", ".join(
            "ARRAY(SELECT nextval(q.seq) FROM (SELECT pg_get_serial_sequence(%s, %s)::regclass"
            " AS seq) q, generate_series(1, %s))"
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
        in order. Their history rows are written by :meth:`flush`."""
        if not rows:
            return []
        pk = model._meta.pk
        fields = [f for f in model._meta.concrete_fields if not f.primary_key]
        if self.postgres:
            ids = self._ids(model, len(rows))
            names = [f.attname for f in fields]
            values = _prepared(
                [(i, *(row[n] for n in names)) for i, row in zip(ids, rows, strict=True)],
                _preparers([pk, *fields]),
            )
            _copy(model._meta.db_table, [pk.column, *(f.column for f in fields)], values)
        else:
            created = model.objects.bulk_create([model(**row) for row in rows])
            ids = [row.pk for row in created]
            if ids and ids[0] is None:
                raise RuntimeError(f"bulk create of {model.__name__} returned no primary keys")
        self._history(model, ids)
        return ids

    def _history(self, model: type[djm.Model], ids: list[int]) -> None:
        history = model.history.model
        columns = [
            history._meta.get_field(f.name).column
            for f in model._meta.concrete_fields
            if not f.primary_key
        ]
        if self.postgres:
            chosen, id_list = "= ANY(%s)", ids
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
        date = history._meta.get_field("history_date")
        stamp = date.get_db_prep_save(timezone.now(), connection)
        self.pending.append((sql, [stamp, self.user_id, id_list]))

    def flush(self) -> None:
        """Write the history rows of everything inserted so far."""
        if not self.pending:
            return
        with connection.cursor() as cursor:
            # One round trip: Django's default client-side binding on psycopg 3 takes several
            # statements in one execute (server-side binding does not).
            options = connection.settings_dict.get("OPTIONS", {})
            if self.postgres and not options.get("server_side_binding"):
                cursor.execute(
                    ";\n".join(sql for sql, _ in self.pending),
                    [p for _, params in self.pending for p in params],
                )
            else:
                for sql, params in self.pending:
                    cursor.execute(sql, params)
        self.pending = []


class RowSync:
    """Syncs rows model by model for one import, counting into ``created``/``updated``/
    ``deleted`` (keyed by the model's plural name)."""

    def __init__(self, *, user: Any, created: Counter, updated: Counter, deleted: Counter):
        self.user = user
        self.created = created
        self.updated = updated
        self.deleted = deleted
        # Model -> ids of stored rows the document dropped, when their deletion waits.
        self.gone: dict[type[djm.Model], list[int]] = {}
        self.new = NewRows(user)

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
