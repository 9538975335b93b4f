"""Bring the rows of one model in line with the rows a site file wants, with history.

The importer describes each section as wanted rows (plain dicts of column values) under a
natural key; :class:`RowSync` compares them with the stored rows (read as dicts, never as model
instances), updates in place what changed, creates what is new and deletes what is gone, and
records a django-simple-history row for every row it writes. Counts go to the import result.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Hashable, Iterable
from typing import Any

from django.db import models as djm
from simple_history.utils import bulk_create_with_history, bulk_update_with_history

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


class RowSync:
    """Syncs rows model by model for one import, counting into ``created``/``updated``/
    ``deleted`` (keyed by the model's plural name)."""

    def __init__(self, *, user: Any, created: Counter, updated: Counter, deleted: Counter):
        self.user = user
        self.created = created
        self.updated = updated
        self.deleted = deleted

    def __call__(
        self,
        model: type[djm.Model],
        existing: Iterable[Row],
        wanted: dict[Hashable, Row],
        key: Callable[[Row], Hashable],
        *,
        delete: bool = True,
    ) -> dict[Hashable, int]:
        """Sync and return natural key -> primary key of every row kept or created."""
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
        ids = {k: row["id"] for k, row in current.items()}
        if to_update:
            bulk_update_with_history(
                to_update, model, sorted(fields), batch_size=2000, default_user=self.user
            )
            self.updated[name] += len(to_update)
        new_keys = [k for k in wanted if k not in current]
        if new_keys:
            created = bulk_create_with_history(
                [model(**wanted[k]) for k in new_keys],
                model,
                batch_size=2000,
                default_user=self.user,
            )
            if created and created[0].pk is None:  # backends that do not return keys
                raise RuntimeError(f"bulk create of {name} returned no primary keys")
            self.created[name] += len(created)
            ids.update(zip(new_keys, (row.pk for row in created), strict=True))
        gone = [k for k in current if k not in wanted]
        if delete and gone:
            model.objects.filter(pk__in=[ids.pop(k) for k in gone]).delete()
            self.deleted[name] += len(gone)
        return ids
