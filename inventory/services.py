"""Writes to the physical record. One service per write, each one transaction.

``site_import`` is the one way a whole site comes in (site file, spreadsheet, tests): it
validates the document first (every error, with its JSON pointer) and writes nothing when
anything is wrong; otherwise it upserts by natural key inside one transaction: coded objects and
keyed children are updated in place, created or deleted, so history shows what really changed.
A change of a CT's terminals in use is recorded as a ``TapChange`` event.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
import re
import uuid
from collections import Counter
from collections.abc import Callable, Hashable, Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

from django.core.exceptions import ValidationError
from django.db import connection, transaction
from django.db import models as djm
from django.db.models import Case, F, Q, Value, When
from django.utils import timezone

from inventory import models
from inventory.changes import change_record
from inventory.sitefile.importer import (
    LOOK_UP,
    ImportResult,
    SiteImportError,
    new_row_counts,
    upsert_site,
)
from inventory.sitefile.rowsync import NewRows
from record.gcpause import gc_paused

__all__ = [
    "ImportResult",
    "SiteImportError",
    "ct_change_tap",
    "sheet_import",
    "site_import",
    "site_record_change",
    "sites_import",
]


class _DryRunRollback(Exception):
    pass


def site_import(*, doc: dict, dry_run: bool = False, user: Any = None) -> ImportResult:
    """Validate a ``loopkeep.site/1`` document and upsert the site it describes, atomically.

    Raises ``SiteImportError`` with every error (``JSON-pointer: what is wrong``) and writes
    nothing when the document is not valid. With ``dry_run`` the import runs to the end inside
    the transaction and is rolled back, so the counts say what it would do. The sections are
    written by ``inventory.sitefile.importer``; a changed site gets a new revision and a
    recompute request in the same transaction.
    """
    return _import([(None, doc)], dry_run=dry_run, user=user)[0]


def sites_import(
    *, docs: Sequence[tuple[str, dict]], dry_run: bool = False, user: Any = None
) -> list[ImportResult]:
    """Validate and upsert several site documents in one transaction: a chunk of a bulk load
    (``bench_import``, ``generate_fleet``), each ``(name, document)`` with the name of its
    site file. Each site is imported exactly as :func:`site_import` would (the same checks,
    rows, history and recompute request), with the round trips of the chunk shared: the new
    rows of all its sites go in by one COPY per table.

    Every document is validated before anything is written; ``SiteImportError`` lists the
    errors of all of them, each as ``name: JSON-pointer: what is wrong``, and nothing of the
    chunk is written (likewise when the database refuses any of it).
    """
    return _import(list(docs), dry_run=dry_run, user=user)


def _import(docs: list[tuple[str | None, dict]], *, dry_run: bool, user: Any) -> list[ImportResult]:
    # The documents and the rows built from them are some 10^5 small containers per site,
    # none in a cycle: the collector's passes over them would find nothing (record.gcpause).
    with gc_paused():
        return _import_paused(docs, dry_run=dry_run, user=user)


def _import_paused(
    docs: list[tuple[str | None, dict]], *, dry_run: bool, user: Any
) -> list[ImportResult]:
    from inventory.sitefile.validate import validate_site_document

    def named(name: str | None, errors: Iterable[Any]) -> list[str]:
        return [str(e) if name is None else f"{name}: {e}" for e in errors]

    errors: list[str] = []
    for name, doc in docs:
        errors += named(name, validate_site_document(doc))
    if errors:
        raise SiteImportError(errors)
    results = [ImportResult(site=doc["site"]["code"], dry_run=dry_run) for _, doc in docs]
    codes = {result.site for result in results}
    try:
        with transaction.atomic():
            _lock_site_codes(codes)
            stored = {
                site.code: site
                for site in models.Site.objects.select_for_update().filter(code__in=codes)
            }
            new = NewRows(user)
            # The ids of every row of the new sites, in one query.
            wanted: Counter = Counter()
            for code, doc in {doc["site"]["code"]: doc for _, doc in docs}.items():
                if code not in stored:
                    wanted.update(new_row_counts(doc))
            new.reserve(dict(wanted))
            site_ids: list[int] = []
            for (name, doc), result in zip(docs, results, strict=True):
                site: Any = stored.get(result.site)
                if result.site in codes:
                    codes.discard(result.site)
                else:  # the site again: its second import reads what the first wrote
                    new.flush()
                    site = LOOK_UP
                try:
                    site_ids.append(upsert_site(doc, result, user, new=new, site=site))
                except SiteImportError as exc:
                    raise SiteImportError(named(name, exc.errors)) from exc
            new.flush()
            _sites_record_change(
                [site_id for site_id, r in zip(site_ids, results, strict=True) if r.changed]
            )
            if dry_run:
                raise _DryRunRollback
    except _DryRunRollback:
        pass
    return results


def _sites_record_change(site_ids: list[int]) -> None:
    """:func:`site_record_change` for several sites: their revisions go up in one statement."""
    if len(set(site_ids)) < len(site_ids):  # a site imported twice goes up twice
        for site_id in site_ids:
            site_record_change(site_id=site_id)
        return
    if len(site_ids) > 1:
        keys = [When(pk=site_id, then=Value(uuid.uuid4())) for site_id in site_ids]
        models.Site.objects.filter(pk__in=site_ids).update(
            revision=F("revision") + 1, record_key=Case(*keys, output_field=djm.UUIDField())
        )
    elif site_ids:
        _bump_revision(site_ids[0])
    for site_id in site_ids:
        change_record(site_id=site_id)


def sheet_import(
    *,
    table: Any,
    kind: str,
    mapping: dict[str, str | None] | None = None,
    dry_run: bool = False,
    user: Any = None,
    progress: Callable[[int, int], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
) -> Any:
    """Import a CT register or tap-change log (``inventory.sheets.Table``) through the site
    file's validation and upsert, every site of the file in one transaction; raises
    ``inventory.sheets.SheetImportError`` with every row error and writes nothing on any."""
    from inventory.sheets.importer import import_table

    return import_table(
        table,
        kind=kind,
        mapping=mapping,
        dry_run=dry_run,
        user=user,
        progress=progress,
        cancelled=cancelled,
    )


def _lock_site_codes(codes: Iterable[str]) -> None:
    """Imports of one site code take turns, even before the site exists: two first imports
    of a new site would otherwise both insert it and one would fail on the unique code. A
    transaction-scoped advisory lock per code on PostgreSQL (released at commit or rollback),
    taken in the order of the keys, so two chunks that share codes cannot wait for each other
    in a circle; SQLite serialises writers anyway."""
    if connection.vendor != "postgresql":
        return
    keys = sorted(
        int.from_bytes(
            hashlib.blake2b(f"loopkeep.site:{code}".encode(), digest_size=8).digest(),
            "big",
            signed=True,
        )
        for code in codes
    )
    lock = "SELECT pg_advisory_xact_lock(%s)"
    with connection.cursor() as cursor:
        if connection.settings_dict.get("OPTIONS", {}).get("server_side_binding"):
            for key in keys:
                cursor.execute(lock, [key])
        else:  # one round trip: the statements run one after the other, in this order
            cursor.execute(";".join([lock] * len(keys)), keys)


def site_record_change(*, site_id: int) -> None:
    """Mark a site's circuits as changed, inside the caller's transaction: its revision goes
    up (every result computed from the old revision is stale from the moment this commits) and
    the change is recorded in the outbox (``inventory.changes``), whose consumers (the
    analysis) schedule the recompute for when the transaction commits."""
    _bump_revision(site_id)
    change_record(site_id=site_id)


def _bump_revision(site_id: int) -> None:
    models.Site.objects.filter(pk=site_id).update(
        revision=F("revision") + 1, record_key=uuid.uuid4()
    )


@transaction.atomic
def ct_change_tap(
    *,
    ct: models.CurrentTransformer,
    to: tuple[str, str],
    by: str = "",
    reason: str = "",
    at: dt.datetime | None = None,
    move_leads: bool = False,
) -> models.TapChange:
    """Change the terminals in use of a CT and record the event."""
    _lock_site(ct.site_id)
    ct = models.CurrentTransformer.objects.get(pk=ct.pk)
    change = _ct_set_tap(ct, (to[0], to[1]), by, reason, at, move_leads=move_leads)
    if change is None:
        raise ValidationError({"in_use": f"{to[0]}-{to[1]} is already the tap in use"})
    _record_checked(site_id=ct.site_id, target=_by_code("cts", ct.code, **_CT_TARGET))
    return change


# --------------------------------------------------------------------------------------------
# Entity services: the writes a planner or records clerk makes one at a time (the admin, the
# API and the pages call these). Each is one transaction: the model's own validation, the write,
# then the rules of the record over the resulting site — the site-file validator run on the
# exported document, so a site edited here always exports a file the importer accepts — and
# ``site_record_change``. A broken rule raises ``ValidationError`` keyed by the edited entity's
# fields ("phase", "set_name"; a child row as "inputs.2.from" in the site file's words) and
# writes nothing.

NON_FIELD = "__all__"
_SECTION_NOUN = {
    "buses": "bus",
    "equipment": "equipment",
    "terminal_blocks": "terminal block",
    "cts": "CT",
    "devices": "device",
    "switches": "switch",
    "procedures": "procedure",
    "wires": "wire",
    "links": "link",
    "grounds": "ground",
}


@dataclass(frozen=True)
class _Target:
    """Where the edited entity sits in the exported site file: its section, how to find its
    index there (called only when a rule is broken), and its keys that are model fields by
    another name."""

    section: str
    locate: Callable[[dict], int | None]
    renamed: dict[str, str] = field(default_factory=dict)
    children: frozenset[str] = frozenset()


def _by_code(section: str, code: str, **kwargs: Any) -> _Target:
    def locate(doc: dict) -> int | None:
        return next(
            (i for i, item in enumerate(doc.get(section, [])) if item.get("code") == code), None
        )

    return _Target(section, locate, **kwargs)


def _by_row(section: str, model: type[djm.Model], row: djm.Model) -> _Target:
    """Wires, links and grounds are exported in the order they were recorded."""

    def locate(doc: dict) -> int | None:
        return model.objects.filter(site_id=row.site_id, pk__lt=row.pk).count()

    return _Target(section, locate)


def _tokens(pointer: str) -> list[str]:
    return [t.replace("~1", "/").replace("~0", "~") for t in pointer.split("/")[1:]]


def _where(doc: dict, tokens: list[str]) -> str:
    """A pointer in words: ``/cts/3/phase`` → ``CT CB-1-B, phase``."""
    if len(tokens) >= 2 and tokens[1].isdigit() and tokens[0] in _SECTION_NOUN:
        items = doc.get(tokens[0], [])
        index = int(tokens[1])
        item = items[index] if index < len(items) else None
        noun = _SECTION_NOUN[tokens[0]]
        if isinstance(item, dict) and "code" in item:
            name = f"{noun} {item['code']}"
        elif isinstance(item, dict) and "from" in item:
            name = f"{noun} {item['from']} – {item['to']}"
        elif isinstance(item, list | str):
            name = f"{noun} {' – '.join(item) if isinstance(item, list) else item}"
        else:
            name = f"{noun} {index + 1}"
        rest = ".".join(tokens[2:])
        return f"{name}, {rest}" if rest else name
    return "/" + "/".join(tokens) if tokens else "site"


def _rule_errors(errors: list[Any], doc: dict, target: _Target | None) -> ValidationError:
    """The validator's errors as field errors of the edited entity; errors elsewhere in the
    site (another CT of the same set, a wire to a terminal that is gone) are form-wide errors
    that say where."""
    index = target.locate(doc) if target else None
    own = [target.section, str(index)] if target and index is not None else None
    found: dict[str, list[str]] = {}
    for error in errors:
        tokens = _tokens(error.pointer)
        if own and tokens[:2] == own and len(tokens) > 2:
            key, rest = tokens[2], tokens[3:]
            if key in target.children and rest:
                name = ".".join([key, *rest[:2]])
            else:
                name = target.renamed.get(key, key)
            found.setdefault(name, []).append(error.message)
        elif own and tokens == own:
            found.setdefault(NON_FIELD, []).append(error.message)
        else:
            found.setdefault(NON_FIELD, []).append(f"{_where(doc, tokens)}: {error.message}")
    return ValidationError(found)


def _record_checked(*, site_id: int, target: _Target | None) -> None:
    """The rules of the record over the whole site as it now stands (inside the caller's
    transaction), then the revision bump and recompute request."""
    from inventory.selectors import site_documents
    from inventory.sitefile.validate import validate_site_document

    doc = site_documents([site_id])[site_id]
    errors = validate_site_document(doc)
    if errors:
        raise _rule_errors(errors, doc, target)
    site_record_change(site_id=site_id)


def _lock_site(site_id: int) -> None:
    """Writes to one site take turns, so the rules are checked over a site nobody else is
    changing at the same moment (PostgreSQL; SQLite serialises writers anyway)."""
    models.Site.objects.select_for_update().filter(pk=site_id).values_list("pk").first()


# A child row's model fields in the site file's words, so that a row's errors have one
# vocabulary whichever layer finds them.
_ROW_KEYS = {
    "from_terminal": "from",
    "to_terminal": "to",
    "burden_r_ohm": "burden_ohm",
    "burden_x_ohm": "burden_ohm",
    "a": "between",
    "b": "between",
}


def _clean(obj: djm.Model, *, prefix: str = "") -> None:
    try:
        obj.full_clean()
    except ValidationError as exc:
        if not prefix:
            raise
        errors: dict[str, list[str]] = {}
        for key, messages in exc.message_dict.items():
            name = prefix if key == NON_FIELD else f"{prefix}.{_ROW_KEYS.get(key, key)}"
            errors.setdefault(name, []).extend(messages)
        raise ValidationError(errors) from exc


def _protected(what: str, exc: djm.ProtectedError) -> ValidationError:
    uses = sorted({str(obj) for obj in exc.protected_objects})
    shown = ", ".join(uses[:5]) + (f" and {len(uses) - 5} more" if len(uses) > 5 else "")
    return ValidationError({NON_FIELD: f"{what} is still in use: {shown}"})


def terminal_for(*, site_id: int, label: str) -> models.Terminal:
    """The terminal ``OWNER:NAME`` of a site, created if the record has not used it yet
    (whether its owner exists is a rule of the record, checked with the rest)."""
    owner, sep, name = str(label).strip().partition(":")
    if not sep or not owner or not name:
        raise ValidationError(f"a terminal is named OWNER:NAME (e.g. TB-101:4), got {label!r}")
    terminal = models.Terminal.objects.filter(site_id=site_id, owner=owner, name=name).first()
    if terminal is None:
        terminal = models.Terminal(site_id=site_id, owner=owner, name=name)
        try:
            terminal.full_clean(validate_unique=False)
        except ValidationError as exc:
            raise ValidationError(f"{label!r}: {'; '.join(exc.messages)}") from exc
        terminal.save()
    return terminal


def _ends(site_id: int, labels: Iterable[str], keys: Iterable[str]) -> list[models.Terminal]:
    found: list[models.Terminal] = []
    errors: dict[str, list[str]] = {}
    for key, label in zip(keys, labels, strict=True):
        try:
            found.append(terminal_for(site_id=site_id, label=label))
        except ValidationError as exc:
            errors.setdefault(key, []).extend(exc.messages)
    if errors:
        raise ValidationError(errors)
    return found


# Procedure operations that name a coded object, by the object's model.
_OPS_NAMING = {
    models.Device: ("remove_device", "insert_device"),
    models.Equipment: ("deenergize", "energize"),
    models.Switch: ("set",),
}
_OPS_WITH_TERMINALS = ("add_jumper", "lift", "land")


def _renamed_op(op: dict, model: type[djm.Model], old: str, new: str, owner: bool) -> dict:
    op = dict(op)
    for key in _OPS_NAMING.get(model, ()):
        if op.get(key) == old:
            op[key] = new
    if owner:
        for key in _OPS_WITH_TERMINALS:
            if isinstance(op.get(key), list):
                op[key] = [
                    f"{new}:{t.partition(':')[2]}" if t.partition(":")[0] == old else t
                    for t in op[key]
                ]
    return op


def _save_coded(obj: djm.Model, old_code: str | None) -> None:
    """Save a coded object. A new code is carried to what names it by code: terminals named
    after it (a relay renamed R-1 → R-2 keeps its wiring) and the stored procedures' steps and
    device lists."""
    obj.save()
    if not old_code or old_code == obj.code:
        return
    model, new = type(obj), obj.code
    owner = model is not models.Switch  # a switch's terminals belong to its group
    if owner:
        for terminal in models.Terminal.objects.filter(site_id=obj.site_id, owner=old_code):
            terminal.owner = new
            terminal.save(update_fields=["owner"])
    for procedure in models.Procedure.objects.filter(site_id=obj.site_id):
        if model is models.Device and old_code in procedure.devices:
            procedure.devices = [new if d == old_code else d for d in procedure.devices]
            procedure.save(update_fields=["devices"])
    steps = models.ProcedureStep.objects.filter(procedure__site_id=obj.site_id)
    for step in steps:
        op = _renamed_op(step.op, model, old_code, new, owner)
        if op != step.op:
            step.op = op
            step.save(update_fields=["op"])


def _old_code(model: type[djm.Model], obj: djm.Model) -> str | None:
    if obj.pk is None:
        return None
    old = model.objects.filter(pk=obj.pk).values_list("site_id", "code").first()
    if old is None:
        return None
    if old[0] != obj.site_id:
        raise ValidationError({"site": "a record cannot move to another site"})
    return old[1]


@transaction.atomic
def site_save(*, site: models.Site) -> models.Site:
    """Create or change a site's own fields (code, name, design temperature, notes)."""
    _clean(site)
    site.save()
    _record_checked(site_id=site.pk, target=None)
    return site


@transaction.atomic
def site_delete(*, site: models.Site) -> None:
    """Delete a site and its whole record (results go with it). Rows that name terminals go
    first: a terminal is protected while anything is wired to it."""
    _lock_site(site.pk)
    for query in (
        models.ProcedureStep.objects.filter(procedure__site=site),
        models.SwitchContact.objects.filter(switch__site=site),
        models.DeviceInput.objects.filter(device__site=site),
        models.DeviceOutput.objects.filter(device__site=site),
        models.Wire.objects.filter(site=site),
        models.Link.objects.filter(site=site),
        models.Ground.objects.filter(site=site),
        models.Terminal.objects.filter(site=site),
        models.CurrentTransformer.objects.filter(site=site),
        models.Equipment.objects.filter(site=site),
    ):
        query.delete()
    site.delete()


def _coded_save(model: type[djm.Model], obj: djm.Model, section: str, **target: Any) -> Any:
    _lock_site(obj.site_id)
    old_code = _old_code(model, obj)
    _clean(obj)
    _save_coded(obj, old_code)
    _record_checked(site_id=obj.site_id, target=_by_code(section, obj.code, **target))
    return obj


def _delete(obj: djm.Model, what: str) -> None:
    site_id = obj.site_id
    _lock_site(site_id)
    try:
        obj.delete()
    except djm.ProtectedError as exc:
        raise _protected(what, exc) from exc
    _record_checked(site_id=site_id, target=None)


@transaction.atomic
def bus_save(*, bus: models.Bus) -> models.Bus:
    """Create or change a bus and its fault level."""
    return _coded_save(models.Bus, bus, "buses")


@transaction.atomic
def bus_delete(*, bus: models.Bus) -> None:
    _delete(bus, f"bus {bus.code}")


@transaction.atomic
def equipment_save(*, equipment: models.Equipment) -> models.Equipment:
    """Create or change primary equipment (its CTs are live while it is in service)."""
    return _coded_save(models.Equipment, equipment, "equipment")


@transaction.atomic
def equipment_delete(*, equipment: models.Equipment) -> None:
    _delete(equipment, f"equipment {equipment.code}")


@transaction.atomic
def terminal_block_save(*, block: models.TerminalBlock) -> models.TerminalBlock:
    """Create or change a terminal block (renaming it renames its terminals)."""
    return _coded_save(models.TerminalBlock, block, "terminal_blocks")


@transaction.atomic
def terminal_block_delete(*, block: models.TerminalBlock) -> None:
    _delete(block, f"terminal block {block.code}")


def _ct_check_winding(terminals: dict[str, Any]) -> None:
    """What the database itself would refuse (names, positions), said before it does."""
    from inventory.models import NAME_RE

    problems: list[str] = []
    seen: dict[float, str] = {}
    for name, position in terminals.items():
        if not re.match(NAME_RE, str(name)):
            problems.append(f"terminal name {name!r} has a space or ':'")
        if not isinstance(position, int | float) or not math.isfinite(position) or position < 0:
            problems.append(f"{name}: the position must be 0 A or more, got {position!r}")
        elif float(position) in seen:
            problems.append(
                f"{name} and {seen[float(position)]} are both at {position:g} A; two terminals "
                "cannot sit at the same point of the winding"
            )
        else:
            seen[float(position)] = name
    if len(terminals) < 2:
        problems.append("a CT winding has at least two terminals")
    if problems:
        raise ValidationError({"terminals": problems})


def _ct_sync_terminals(ct: models.CurrentTransformer, terminals: dict[str, Any]) -> None:
    _ct_check_winding(terminals)
    current = {t.name: t for t in models.Terminal.objects.filter(site_id=ct.site_id, owner=ct.code)}
    gone = [t for name, t in current.items() if name not in terminals and t.ct_id == ct.pk]
    if gone:
        try:
            models.Terminal.objects.filter(pk__in=[t.pk for t in gone]).delete()
        except djm.ProtectedError as exc:
            raise ValidationError(
                {"terminals": _protected(f"terminal {gone[0].label}", exc).messages}
            ) from exc
    moving = [
        t
        for name, t in current.items()
        if name in terminals and (t.ct_id != ct.pk or t.position_a != float(terminals[name]))
    ]
    # Positions are unique per CT and checked row by row: park the moving rows above every
    # position first, so a reordering of the winding never meets itself halfway.
    top = max(
        [float(p) for p in terminals.values()] + [t.position_a or 0 for t in current.values()]
    )
    for offset, terminal in enumerate(moving, start=1):
        models.Terminal.objects.filter(pk=terminal.pk).update(ct=ct, position_a=top + offset)
    for terminal in moving:
        terminal.ct = ct
        terminal.position_a = float(terminals[terminal.name])
        terminal.save(update_fields=["ct", "position_a"])
    for name, position in terminals.items():
        if name not in current:
            models.Terminal.objects.create(
                site_id=ct.site_id, owner=ct.code, name=name, ct=ct, position_a=float(position)
            )


def _ct_set_tap(
    ct: models.CurrentTransformer,
    to: tuple[str, str],
    by: str,
    reason: str,
    at: Any,
    *,
    move_leads: bool = False,
) -> models.TapChange | None:
    """Move the tap roles to ``to`` and record the event; None when nothing changes."""
    own = {t.name: t for t in models.Terminal.objects.filter(ct=ct)}
    first, second = to
    if first == second or first not in own or second not in own:
        raise ValidationError(
            {
                "in_use": f"terminals in use must be two different terminals of {ct.code} "
                f"({', '.join(sorted(own))}), got {first}-{second}"
            }
        )
    previous = [
        next((t.name for t in own.values() if t.tap_role == role), None)
        for role in ("first", "second")
    ]
    if previous == [first, second]:
        return None
    roles = {first: "first", second: "second"}
    if move_leads and None not in previous:
        _reland(own, dict(zip(previous, (first, second), strict=True)))
    moving = [t for t in own.values() if t.tap_role != roles.get(t.name, "")]
    # Clear first (one role per CT is checked row by row), then save each row so that history
    # records the change.
    models.Terminal.objects.filter(pk__in=[t.pk for t in moving]).update(tap_role="")
    for terminal in moving:
        terminal.tap_role = roles.get(terminal.name, "")
        terminal.save(update_fields=["tap_role"])
    if None in previous:
        return None  # a new CT's first tap is its initial value, not a change
    return models.TapChange.objects.create(
        ct=ct,
        from_tap=previous,
        to_tap=[first, second],
        changed_at=at or timezone.now(),
        changed_by=by,
        reason=reason,
    )


def _reland(own: dict[str, models.Terminal], moves: dict[str, str]) -> None:
    """Move every wire, link and ground end from the old terminals of a CT to the new ones
    (all moves at once, so a swap of the two ends stays a swap). Each row is saved one by one
    so that its history records the move."""
    old_to_new = {own[a].pk: own[b] for a, b in moves.items() if a != b}
    if not old_to_new:
        return
    ids = list(old_to_new)
    for model, ends in (
        (models.Wire, ("from_terminal", "to_terminal")),
        (models.Link, ("a", "b")),
        (models.Ground, ("terminal",)),
    ):
        query = Q()
        for end in ends:
            query |= Q(**{f"{end}_id__in": ids})
        for row in model.objects.filter(query):
            for end in ends:
                new = old_to_new.get(getattr(row, f"{end}_id"))
                if new is not None:
                    setattr(row, end, new)
            row.save()


_CT_TARGET = {"renamed": {"set": "set_name"}, "children": frozenset({"tap_changes"})}


@transaction.atomic
def ct_save(
    *,
    ct: models.CurrentTransformer,
    terminals: dict[str, float] | None = None,
    in_use: tuple[str, str] | None = None,
    by: str = "",
    reason: str = "",
) -> models.CurrentTransformer:
    """Create or change a CT: its fields, its winding (``terminals``: name → cumulative
    primary A; None keeps them) and the tap in use (a change is recorded as a tap change event
    by ``by`` for ``reason``). A new CT needs both."""
    _lock_site(ct.site_id)
    old_code = _old_code(models.CurrentTransformer, ct)
    if old_code is None and (terminals is None or in_use is None):
        raise ValidationError(
            {"terminals" if terminals is None else "in_use": "a new CT needs its winding and tap"}
        )
    _clean(ct)
    _save_coded(ct, old_code)
    if terminals is not None:
        _ct_sync_terminals(ct, terminals)
    if in_use is not None:
        _ct_set_tap(ct, (in_use[0], in_use[1]), by, reason or "edited", None)
    _record_checked(site_id=ct.site_id, target=_by_code("cts", ct.code, **_CT_TARGET))
    return ct


@transaction.atomic
def ct_delete(*, ct: models.CurrentTransformer) -> None:
    _delete(ct, f"CT {ct.code}")


def _sync_rows(
    model: type[djm.Model],
    existing: Iterable[djm.Model],
    rows: list[djm.Model],
    key: Callable[[djm.Model], Hashable],
    prefix: str,
) -> None:
    """Bring a parent's child rows in line with ``rows`` (unsaved or saved instances), matched
    by ``key``: gone rows are deleted first, so a name or position can move between rows."""
    current = {key(row): row for row in existing}
    wanted_keys = [key(row) for row in rows]
    gone = [row.pk for k, row in current.items() if k not in wanted_keys]
    if gone:
        model.objects.filter(pk__in=gone).delete()
    errors: dict[str, list[str]] = {}
    for index, row in enumerate(rows):
        old = current.get(key(row))
        if old is not None:
            row.pk = old.pk
            row._state.adding = False
        try:
            _clean(row, prefix=f"{prefix}.{index}")
        except ValidationError as exc:
            errors.update(exc.message_dict)
            continue
        row.save()
    if errors:
        raise ValidationError(errors)


def _input_row(device: models.Device, entry: dict) -> models.DeviceInput:
    ends = _ends(device.site_id, (entry.get("from"), entry.get("to")), ("from", "to"))
    burden_ohm = entry.get("burden_ohm") or (None, None)
    has_va = entry.get("burden_va") is not None
    return models.DeviceInput(
        device=device,
        name=entry.get("name", ""),
        from_terminal=ends[0],
        to_terminal=ends[1],
        rated_a=entry.get("rated_a"),
        burden_va=entry.get("burden_va"),
        pf=(entry.get("pf") if entry.get("pf") is not None else 1.0) if has_va else None,
        burden_r_ohm=burden_ohm[0],
        burden_x_ohm=burden_ohm[1],
    )


def _prefixed(prefix: str, build: Callable[[Any], Any], entries: list[Any]) -> list[Any]:
    rows, errors = [], {}
    for index, entry in enumerate(entries):
        try:
            rows.append(build(entry))
        except ValidationError as exc:
            errors.update(
                {
                    f"{prefix}.{index}" + ("" if key == NON_FIELD else f".{key}"): messages
                    for key, messages in exc.message_dict.items()
                }
            )
    if errors:
        raise ValidationError(errors)
    return rows


@transaction.atomic
def device_save(
    *,
    device: models.Device,
    inputs: list[dict] | None = None,
    outputs: list[dict] | None = None,
) -> models.Device:
    """Create or change a device with its current inputs and trip outputs, given as the site
    file writes them (``{"name", "from", "to", "rated_a", "burden_va", "pf"}`` or with
    ``"burden_ohm": [R, X]``; ``{"name", "terminal", "target"}``), matched by name. None keeps
    the rows as they are."""
    _lock_site(device.site_id)
    old_code = _old_code(models.Device, device)
    _clean(device)
    _save_coded(device, old_code)
    if old_code and old_code != device.code:
        # Rows given in the same call may still name the device's terminals by the old code.
        def follow(label: Any) -> Any:
            owner, sep, name = str(label).partition(":")
            return f"{device.code}:{name}" if sep and owner == old_code else label

        keys = ("from", "to", "terminal", "target")
        inputs = (
            None
            if inputs is None
            else [{k: follow(v) if k in keys else v for k, v in e.items()} for e in inputs]
        )
        outputs = (
            None
            if outputs is None
            else [{k: follow(v) if k in keys else v for k, v in e.items()} for e in outputs]
        )
    if inputs is not None:
        rows = _prefixed("inputs", lambda e: _input_row(device, e), inputs)
        _sync_rows(
            models.DeviceInput,
            models.DeviceInput.objects.filter(device=device),
            rows,
            lambda r: r.name,
            "inputs",
        )
    if outputs is not None:

        def output_row(entry: dict) -> models.DeviceOutput:
            ends = _ends(
                device.site_id, (entry.get("terminal"), entry.get("target")), ("terminal", "target")
            )
            return models.DeviceOutput(
                device=device, name=entry.get("name", ""), terminal=ends[0], target=ends[1]
            )

        _sync_rows(
            models.DeviceOutput,
            models.DeviceOutput.objects.filter(device=device),
            _prefixed("outputs", output_row, outputs),
            lambda r: r.name,
            "outputs",
        )
    _record_checked(
        site_id=device.site_id,
        target=_by_code("devices", device.code, children=frozenset({"inputs", "outputs"})),
    )
    return device


@transaction.atomic
def device_delete(*, device: models.Device) -> None:
    _delete(device, f"device {device.code}")


_WIRE_FIELDS = {"from": "from_terminal", "to": "to_terminal"}


def _two_ended_save(
    obj: djm.Model, ends: tuple[str, str], fields: tuple[str, str], section: str
) -> Any:
    _lock_site(obj.site_id)
    a, b = _ends(obj.site_id, ends, fields)
    setattr(obj, fields[0], a)
    setattr(obj, fields[1], b)
    _clean(obj)
    obj.save()
    renamed = {"0": fields[0], "1": fields[1]}
    if section == "wires":
        renamed = _WIRE_FIELDS
    target = _by_row(section, type(obj), obj)
    _record_checked(
        site_id=obj.site_id, target=_Target(target.section, target.locate, renamed=renamed)
    )
    return obj


@transaction.atomic
def wire_save(*, wire: models.Wire, ends: tuple[str, str]) -> models.Wire:
    """Create or change a wire between two terminals ``OWNER:NAME`` (created as named)."""
    return _two_ended_save(wire, ends, ("from_terminal", "to_terminal"), "wires")


@transaction.atomic
def wire_delete(*, wire: models.Wire) -> None:
    _delete(wire, str(wire))


@transaction.atomic
def link_save(*, link: models.Link, ends: tuple[str, str]) -> models.Link:
    """Create or change a zero-impedance link (jumper, bar, slide link)."""
    return _two_ended_save(link, ends, ("a", "b"), "links")


@transaction.atomic
def link_delete(*, link: models.Link) -> None:
    _delete(link, str(link))


@transaction.atomic
def ground_save(*, ground: models.Ground, terminal: str) -> models.Ground:
    """Bond a terminal to station ground."""
    _lock_site(ground.site_id)
    (ground.terminal,) = _ends(ground.site_id, (terminal,), ("terminal",))
    _clean(ground)
    ground.save()
    target = _by_row("grounds", models.Ground, ground)
    _record_checked(site_id=ground.site_id, target=target)
    return ground


@transaction.atomic
def ground_delete(*, ground: models.Ground) -> None:
    _delete(ground, str(ground))


@transaction.atomic
def switch_save(
    *,
    switch: models.Switch,
    positions: list[str] | None = None,
    normal: str | None = None,
    contacts: list[dict] | None = None,
) -> models.Switch:
    """Create or change a switch: its ordered positions with the normal one, and its contacts
    (``{"between": [T1, T2], "closed_in": [positions]}``, in order; they have no name, so they
    are replaced as a whole). None keeps positions (with normal) or contacts as they are."""
    _lock_site(switch.site_id)
    if switch.pk is None and (positions is None or contacts is None):
        raise ValidationError({"positions": "a new switch needs its positions and contacts"})
    old_code = _old_code(models.Switch, switch)
    _clean(switch)
    _save_coded(switch, old_code)
    if positions is not None:
        if normal not in positions:
            raise ValidationError(
                {"normal": f"the normal position must be one of the positions, got {normal!r}"}
            )
        existing = list(models.SwitchPosition.objects.filter(switch=switch))
        # The one-normal-position constraint is checked row by row: drop the flag first.
        models.SwitchPosition.objects.filter(switch=switch, is_normal=True).exclude(
            name=normal
        ).update(is_normal=False)
        rows = [
            models.SwitchPosition(switch=switch, name=name, order=i, is_normal=name == normal)
            for i, name in enumerate(positions)
        ]
        _sync_rows(models.SwitchPosition, existing, rows, lambda r: r.name, "positions")
    if contacts is not None:

        def contact_row(entry: dict) -> models.SwitchContact:
            between = list(entry.get("between") or ())
            a, b = _ends(switch.site_id, [*between, None, None][:2], ("between", "between"))
            return models.SwitchContact(
                switch=switch, a=a, b=b, closed_in=list(entry.get("closed_in") or [])
            )

        rows = _prefixed("contacts", contact_row, contacts)
        existing = list(models.SwitchContact.objects.filter(switch=switch).order_by("id"))
        for row, old in zip(rows, existing, strict=False):
            row.pk, row._state.adding = old.pk, False
        _sync_rows(models.SwitchContact, existing, rows, lambda r: r.pk or id(r), "contacts")
    _record_checked(
        site_id=switch.site_id,
        target=_by_code("switches", switch.code, children=frozenset({"contacts"})),
    )
    return switch


@transaction.atomic
def switch_delete(*, switch: models.Switch) -> None:
    _delete(switch, f"switch {switch.code}")


@transaction.atomic
def procedure_save(
    *, procedure: models.Procedure, steps: list[dict] | None = None
) -> models.Procedure:
    """Create or change a procedure; its steps (operations as the site file writes them) are
    replaced as a whole."""
    _lock_site(procedure.site_id)
    _old_code(models.Procedure, procedure)  # a procedure stays in its site
    _clean(procedure)
    procedure.save()
    if steps is not None:
        rows = [
            models.ProcedureStep(procedure=procedure, order=i, op=op)
            for i, op in enumerate(steps, start=1)
        ]
        _sync_rows(
            models.ProcedureStep,
            models.ProcedureStep.objects.filter(procedure=procedure),
            rows,
            lambda r: r.order,
            "steps",
        )
    _record_checked(
        site_id=procedure.site_id,
        target=_by_code("procedures", procedure.code, children=frozenset({"steps"})),
    )
    return procedure


@transaction.atomic
def procedure_delete(*, procedure: models.Procedure) -> None:
    _delete(procedure, f"procedure {procedure.code}")
