"""Reads of the physical record.

``site_records`` reads any number of stored sites as typed records (``record.SiteRecord``) with
a constant number of queries (one per table, whatever the number of sites): the engine's input
and the fleet recompute read through it, and the export (``site_documents``) serialises it.
"""

from __future__ import annotations

import json
from collections import defaultdict
from collections.abc import Callable, Iterable, Sequence
from itertools import groupby
from operator import itemgetter
from typing import Any

from django.db import connection
from django.db.models import CharField, Model, OuterRef, Prefetch, QuerySet, Subquery, Value
from django.db.models.functions import Abs, Concat

import record as rec
from inventory import models
from record.gcpause import gc_paused

# The site file's number form (integral floats as integers), used by the API too.
num = rec.document.num

SITE_FORMAT = rec.model.SITE_FORMAT


def _rows(qs: QuerySet) -> list[tuple[Any, ...]]:
    """The rows of a ``values_list`` query as the database driver gives them: no per-value
    converters (JSON columns come back as their text, booleans as the driver's; the caller
    decodes what it reads). The record read's rows are plain numbers, strings and ids, and
    the converters cost more than the query."""
    sql, params = qs.query.sql_with_params()
    return _execute(sql, params)


def _execute(sql: str, params: Sequence[Any]) -> list[tuple[Any, ...]]:
    with connection.cursor() as cursor:
        cursor.execute(sql, params)
        return cursor.fetchall()


# (vendor, query name, number of ids) -> (SQL, where the ids go in the parameters)
_SQL_CACHE: dict[tuple[str, str, int], tuple[str, tuple[Any, ...], tuple[int, ...]]] = {}
_SQL_CACHE_MAX = 512


def _by_ids(name: str, build: Callable[[list[int]], QuerySet], ids: list[int]) -> list[Any]:
    """The rows of ``build(ids)`` (a ``values_list`` filtered by ``ids``, which are distinct)
    read like :func:`_rows`, with the SQL compiled once per query: a chunk of the fleet
    recompute reads 18 tables, and Django's compilation of 18 querysets costs more than a
    small chunk's rows. The SQL is compiled for two sets of placeholder ids; the parameters
    that differ are where the ids go (anything else, say a constant, is kept). On PostgreSQL
    the ids go in as one array (``col = ANY(%s)``: one statement whatever their number, and
    the planner sees the ids as one value); elsewhere as one placeholder each (compiled once
    per number of ids)."""
    if not ids:
        return []
    pg = connection.vendor == "postgresql"
    n = 1 if pg else len(ids)
    key = (connection.vendor, name, n)
    hit = _SQL_CACHE.get(key)
    if hit is None:
        sql, one = build(list(range(1, n + 1))).query.sql_with_params()
        sql_two, two = build(list(range(n + 1, 2 * n + 1))).query.sql_with_params()
        at: tuple[int, ...] = ()
        if (sql_two, len(two)) == (sql, len(one)):
            at = tuple(k for k, (p, q) in enumerate(zip(one, two, strict=True)) if p != q)
        if [one[k] for k in at] != [*range(1, n + 1)] or (pg and sql.count(_IN_ONE) != 1):
            return _rows(build(ids))  # not a plain filter by the ids: compiled each time
        if pg:
            sql = sql.replace(_IN_ONE, " = ANY(%s)")
        if len(_SQL_CACHE) >= _SQL_CACHE_MAX:
            _SQL_CACHE.clear()
        hit = _SQL_CACHE[key] = (sql, tuple(one), at)
    sql, template, at = hit
    params = list(template)
    if pg:
        params[at[0]] = ids
        return _execute(sql, params)
    if len(at) == len(template):
        return _execute(sql, ids)
    for k, value in zip(at, ids, strict=True):
        params[k] = value
    return _execute(sql, params)


_IN_ONE = " IN (%s)"


def _table(
    ids: list[int] | tuple[list[int], list[int]],
    model: type[Model],
    fields: tuple[str, ...],
    *,
    order: tuple[str, ...] = ("id",),
    by: str | tuple[str, str] = "site_id",
    where: dict[str, Any] | None = None,
    annotate: dict[str, Any] | None = None,
) -> list[tuple[Any, ...]]:
    """``fields`` of the rows of ``model`` whose ``by`` is one of ``ids`` (and that match
    ``where``), in ``order``, as tuples (:func:`_by_ids`; an empty ``order`` also drops the
    model's default ordering). ``fields`` may name expressions given in ``annotate``.

    The rows of a part of a part (a device's inputs) are read by their parent's ids on
    PostgreSQL (``ids`` = (parent ids, site ids), ``by`` = (parent field, site lookup)): an
    index scan of the rows wanted, where a join on the site reads the whole table. Elsewhere
    the site ids go in, through the join (one placeholder per id: there are fewer sites)."""
    if isinstance(by, tuple):
        pg = connection.vendor == "postgresql"
        ids, by = (ids[0], by[0]) if pg else (ids[1], by[1])
    assert isinstance(ids, list) and isinstance(by, str)

    def build(some: list[int]) -> QuerySet:
        qs = model._default_manager.filter(**{f"{by}__in": some}, **(where or {}))
        if annotate:
            qs = qs.annotate(**annotate)
        return qs.order_by(*order).values_list(*fields)

    key = (
        f"{model._meta.label}:{by}:{order}:{fields}:{sorted(where or ())}:{sorted(annotate or ())}"
    )
    return _by_ids(key, build, ids)


class _Makers(dict[type, Callable[..., Any]]):
    """``record.model.maker`` of each record class, made once (``_MAKERS[rec.Wire]``)."""

    def __missing__(self, cls: type) -> Callable[..., Any]:
        make = self[cls] = rec.model.maker(cls)
        return make


_MAKERS = _Makers()
_first, _fifth, _sixth = itemgetter(0), itemgetter(4), itemgetter(5)


class _Decoded(dict[Any, Any]):
    """JSON column text -> the value ``convert`` makes of it, decoded once per distinct text
    (a switch contact's ``["closed"]``, a relay's functions, a step repeat across the fleet):
    ``decoded[text]``, a plain dict lookup once the text has been seen. The values are
    immutable (tuples, typed operations), so sharing them is safe."""

    def __init__(self, convert: Callable[[Any], Any]) -> None:
        super().__init__()
        self._convert = convert

    def __missing__(self, raw: Any) -> Any:
        value = None
        if raw is not None:
            value = self._convert(json.loads(raw) if isinstance(raw, (str, bytes)) else raw)
        self[raw] = value
        return value


def _tuple(value: Any) -> tuple[Any, ...]:
    return tuple(value or ())


def _points(value: Any) -> tuple[tuple[float, float], ...]:
    return tuple((float(a), float(v)) for a, v in value)


def site_by_code(code: str) -> models.Site:
    return models.Site.objects.get(code=code)


def site_records(site_ids: Iterable[int]) -> dict[int, rec.SiteRecord]:
    """The typed records of the given sites, keyed by site id, in the canonical order the export
    writes (codes sorted; wires, links and contacts in the order they were recorded). One query
    per table, whatever the number of sites; rows are read as tuples (dict rows cost more than
    the query) and the records built from them directly."""
    wanted = sorted(set(site_ids))
    if not wanted:
        return {}
    with gc_paused():  # the rows make some hundred thousand objects, none in a cycle
        return _site_records(wanted)


def _site_records(wanted: list[int]) -> dict[int, rec.SiteRecord]:
    site_rows = _table(
        wanted,
        models.Site,
        ("id", "code", "name", "design_temp_c", "notes"),
        order=("code",),
        by="pk",
    )
    ids = [row[0] for row in site_rows]
    if not ids:
        return {}
    make = _MAKERS

    # Every terminal: its label (made by the database) and, for a CT's, the CT, its position
    # and tap role. Ordered by CT, a CT's terminals come together; each CT's then sorted by
    # position, then name (the rows of the other terminals form one group, of no CT).
    terminal_rows = _table(
        ids,
        models.Terminal,
        ("ct_id", "position_a", "name", "tap_role", "id", "label"),
        order=("ct_id",),
        annotate={"label": Concat("owner", Value(":"), "name", output_field=CharField())},
    )
    labels: dict[int, str] = dict(
        zip(map(_fifth, terminal_rows), map(_sixth, terminal_rows), strict=True)
    )
    ct_terminals = {
        ct_id: sorted(own) for ct_id, own in groupby(terminal_rows, _first) if ct_id is not None
    }
    del terminal_rows

    buses: dict[int, list[Any]] = defaultdict(list)
    bus_codes: dict[int, str] = {}
    Bus = make[rec.Bus]
    for bid, site_id, code, kv, three, ground, xr in _table(
        ids,
        models.Bus,
        ("id", "site_id", "code", "kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r"),
        order=("code",),
    ):
        bus_codes[bid] = code
        buses[site_id].append(Bus(code, kv, three, ground, xr))

    equipment: dict[int, list[Any]] = defaultdict(list)
    equipment_codes: dict[int, str] = {}
    Equipment = make[rec.Equipment]
    for eid, site_id, code, kind, bus_id, in_service, max_load_a in _table(
        ids,
        models.Equipment,
        ("id", "site_id", "code", "kind", "bus_id", "in_service", "max_load_a"),
        order=("code",),
    ):
        equipment_codes[eid] = code
        bus = bus_codes[bus_id] if bus_id else None
        equipment[site_id].append(Equipment(code, kind, bus, bool(in_service), max_load_a))

    blocks: dict[int, list[Any]] = defaultdict(list)
    TerminalBlock = make[rec.TerminalBlock]
    for site_id, code, description in _table(
        ids, models.TerminalBlock, ("site_id", "code", "description"), order=("code",)
    ):
        blocks[site_id].append(TerminalBlock(code, description))

    # Through Django's converters: a date-time and JSON lists (few rows).
    tap_changes: dict[int, list[rec.TapChange]] = defaultdict(list)
    for ct_id, from_tap, to_tap, changed_at, by, reason in (
        models.TapChange.objects.filter(ct__site_id__in=ids)
        .order_by("changed_at", "id")
        .values_list("ct_id", "from_tap", "to_tap", "changed_at", "changed_by", "reason")
    ):
        tap_changes[ct_id].append(
            rec.TapChange(tuple(from_tap), tuple(to_tap), changed_at, by, reason)
        )

    cts: dict[int, list[Any]] = defaultdict(list)
    points = _Decoded(_points)
    CT = make[rec.CT]
    no_terminals: list[tuple[Any, ...]] = []
    for row in _table(
        ids,
        models.CurrentTransformer,
        (
            "id",
            "site_id",
            "code",
            "equipment_id",
            "phase",
            "set_name",
            "secondary_a",
            "accuracy",
            "rated_burden_va",
            "knee_v",
            "winding_ohm",
            "rating_factor",
            "excitation",
            "nameplate",
        ),
        order=("code",),
    ):
        (ct_id, site_id, code, eq_id, phase, set_name, secondary_a, accuracy) = row[:8]
        (rated_burden_va, knee_v, winding_ohm, rating_factor, excitation, nameplate) = row[8:]
        own = ct_terminals.get(ct_id, no_terminals)
        first = second = None
        for _, _, name, role, _, _ in own:
            if role == "first":
                first = name
            elif role == "second":
                second = name
        cts[site_id].append(
            CT(
                code,
                equipment_codes[eq_id],
                phase,
                float(secondary_a),
                tuple([(name, position) for _, position, name, _, _, _ in own]),
                tuple([n for n in (first, second) if n is not None]),
                set_name or None,
                accuracy or None,
                rated_burden_va,
                knee_v,
                winding_ohm,
                rating_factor,
                None if excitation is None else points[excitation],
                nameplate,
                tuple(tap_changes[ct_id]) if ct_id in tap_changes else (),
            )
        )

    devices: dict[int, list[Any]] = defaultdict(list)
    tuple_of = _Decoded(_tuple)
    device_rows = _table(
        ids,
        models.Device,
        ("id", "site_id", "code", "kind", "functions", "ratio_setting"),
        order=("code",),
    )
    device_ids = [row[0] for row in device_rows]
    # Inputs and outputs grouped by device, in the order recorded.
    DeviceInput = make[rec.DeviceInput]
    inputs = {
        device_id: tuple(
            [
                DeviceInput(
                    name,
                    labels[a],
                    labels[b],
                    float(rated_a),
                    burden_va,
                    pf,
                    None if burden_va is not None else (r_ohm, x_ohm),
                )
                for _, name, a, b, rated_a, burden_va, pf, r_ohm, x_ohm in rows
            ]
        )
        for device_id, rows in groupby(
            _table(
                (device_ids, ids),
                models.DeviceInput,
                (
                    "device_id",
                    "name",
                    "from_terminal_id",
                    "to_terminal_id",
                    "rated_a",
                    "burden_va",
                    "pf",
                    "burden_r_ohm",
                    "burden_x_ohm",
                ),
                order=("device_id", "id"),
                by=("device_id", "device__site_id"),
            ),
            _first,
        )
    }
    DeviceOutput = make[rec.DeviceOutput]
    outputs = {
        device_id: tuple(
            [
                DeviceOutput(name, labels[terminal], labels[target])
                for _, name, terminal, target in rows
            ]
        )
        for device_id, rows in groupby(
            _table(
                (device_ids, ids),
                models.DeviceOutput,
                ("device_id", "name", "terminal_id", "target_id"),
                order=("device_id", "id"),
                by=("device_id", "device__site_id"),
            ),
            _first,
        )
    }
    Device = make[rec.Device]
    for did, site_id, code, kind, functions, ratio_setting in device_rows:
        devices[site_id].append(
            Device(
                code,
                kind,
                () if functions is None else tuple_of[functions],
                ratio_setting or None,
                inputs.get(did, ()),
                outputs.get(did, ()),
            )
        )

    wires: dict[int, list[Any]] = defaultdict(list)
    Wire = make[rec.Wire]
    for site_id, a, b, size, material, length_m, length_ft, r_ohm in _table(
        ids,
        models.Wire,
        (
            "site_id",
            "from_terminal_id",
            "to_terminal_id",
            "size",
            "material",
            "length_m",
            "length_ft",
            "r_ohm",
        ),
    ):
        wires[site_id].append(
            Wire(labels[a], labels[b], size, material, length_m, length_ft, r_ohm)
        )

    links: dict[int, list[Any]] = defaultdict(list)
    Link = make[rec.Link]
    for site_id, a, b in _table(ids, models.Link, ("site_id", "a_id", "b_id")):
        links[site_id].append(Link(labels[a], labels[b]))
    grounds: dict[int, list[Any]] = defaultdict(list)
    for site_id, terminal in _table(ids, models.Ground, ("site_id", "terminal_id")):
        grounds[site_id].append(labels[terminal])

    switch_rows = _table(
        ids, models.Switch, ("id", "site_id", "code", "kind", "transition"), order=("code",)
    )
    switch_ids = [row[0] for row in switch_rows]
    # A switch's positions in order, and its normal one (the first marked normal).
    positions: dict[int, tuple[str, ...]] = {}
    normals: dict[int, str] = {}
    for switch_id, rows in groupby(
        _table(
            (switch_ids, ids),
            models.SwitchPosition,
            ("switch_id", "name", "is_normal"),
            order=("switch_id", "order"),
            by=("switch_id", "switch__site_id"),
        ),
        _first,
    ):
        own = list(rows)
        positions[switch_id] = tuple([name for _, name, _ in own])
        for _, name, is_normal in own:
            if is_normal:
                normals[switch_id] = name
                break
    Contact = make[rec.Contact]
    contacts = {
        switch_id: tuple(
            [
                Contact((labels[a], labels[b]), () if closed_in is None else tuple_of[closed_in])
                for _, a, b, closed_in in rows
            ]
        )
        for switch_id, rows in groupby(
            _table(
                (switch_ids, ids),
                models.SwitchContact,
                ("switch_id", "a_id", "b_id", "closed_in"),
                order=("switch_id", "id"),
                by=("switch_id", "switch__site_id"),
            ),
            _first,
        )
    }
    switches: dict[int, list[Any]] = defaultdict(list)
    Switch = make[rec.Switch]
    for sw_id, site_id, code, kind, transition in switch_rows:
        switches[site_id].append(
            Switch(
                code,
                kind,
                positions.get(sw_id, ()),
                normals.get(sw_id),
                transition,
                contacts.get(sw_id, ()),
            )
        )

    procedure_rows = _table(
        ids,
        models.Procedure,
        ("id", "site_id", "code", "title", "author", "devices"),
        order=("code",),
    )
    steps: dict[int, list[rec.Operation]] = defaultdict(list)
    operation = _Decoded(rec.operation_from_json)
    for procedure_id, order, op in _table(
        ([row[0] for row in procedure_rows], ids),
        models.ProcedureStep,
        ("procedure_id", "order", "op"),
        order=("procedure_id", "order"),
        by=("procedure_id", "procedure__site_id"),
    ):
        try:
            steps[procedure_id].append(operation[op])
        except rec.OperationError as err:
            raise rec.RecordError(f"procedure step {order} (id {procedure_id}): {err}") from err
    procedures: dict[int, list[Any]] = defaultdict(list)
    Procedure = make[rec.Procedure]
    for pid, site_id, code, title, author, on_devices in procedure_rows:
        procedures[site_id].append(
            Procedure(
                code,
                title,
                tuple(steps[pid]) if pid in steps else (),
                author,
                () if on_devices is None else tuple_of[on_devices],
            )
        )

    empty: tuple[Any, ...] = ()
    SiteRecord, Site = make[rec.SiteRecord], make[rec.Site]
    return {
        sid: SiteRecord(
            Site(code, name, design_temp_c, notes),
            tuple(buses.get(sid, empty)),
            tuple(equipment.get(sid, empty)),
            tuple(blocks.get(sid, empty)),
            tuple(cts.get(sid, empty)),
            tuple(devices.get(sid, empty)),
            tuple(wires.get(sid, empty)),
            tuple(links.get(sid, empty)),
            tuple(grounds.get(sid, empty)),
            tuple(switches.get(sid, empty)),
            tuple(procedures.get(sid, empty)),
        )
        for sid, code, name, design_temp_c, notes in site_rows
    }


def site_record(site: models.Site) -> rec.SiteRecord:
    """The typed record of one stored site."""
    return site_records([site.pk])[site.pk]


def site_documents(site_ids: Iterable[int]) -> dict[int, dict]:
    """The site documents (``loopkeep.site/1``) of the given sites, keyed by site id: the
    export serialises the records of :func:`site_records` (same order, same queries)."""
    return {sid: rec.record_to_document(r) for sid, r in site_records(site_ids).items()}


def site_document(site: models.Site) -> dict:
    """The site file document of one stored site."""
    return site_documents([site.pk])[site.pk]


# ---------------------------------------------------------------------------------------------
# reads for the API (a constant number of queries whatever the number of rows)


def _tap_position(role: str) -> Subquery:
    return Subquery(
        models.Terminal.objects.filter(ct=OuterRef("pk"), tap_role=role).values("position_a")[:1]
    )


def cts_queryset(*, site_id: int) -> QuerySet:
    """A site's CTs with their equipment, terminals (by position) and the primary amperes of
    the tap in use (``tap_primary_a``, for the ratio filter)."""
    return (
        models.CurrentTransformer.objects.filter(site_id=site_id)
        .select_related("equipment")
        .annotate(tap_primary_a=Abs(_tap_position("first") - _tap_position("second")))
        .prefetch_related(
            Prefetch(
                "ct_terminals",
                queryset=models.Terminal.objects.order_by("position_a", "name"),
            )
        )
    )


def devices_queryset(*, site_id: int) -> QuerySet:
    """A site's devices with their inputs and outputs and the terminals they name."""
    return models.Device.objects.filter(site_id=site_id).prefetch_related(
        Prefetch(
            "inputs",
            queryset=models.DeviceInput.objects.select_related("from_terminal", "to_terminal"),
        ),
        Prefetch(
            "outputs", queryset=models.DeviceOutput.objects.select_related("terminal", "target")
        ),
    )


def procedures_queryset(*, site_id: int) -> QuerySet:
    """A site's procedures with their steps in order."""
    return models.Procedure.objects.filter(site_id=site_id).prefetch_related(
        Prefetch("steps", queryset=models.ProcedureStep.objects.order_by("order"))
    )


def tap_changes_queryset() -> QuerySet:
    """Every recorded tap change with its CT, site and the CT's terminal positions (to give
    the ratios), oldest first."""
    return models.TapChange.objects.select_related("ct__site").prefetch_related(
        Prefetch(
            "ct__ct_terminals", queryset=models.Terminal.objects.only("ct", "name", "position_a")
        )
    )


def codes(model: type[Model], *, site_id: int | None = None) -> list[str]:
    """Every code of ``model`` (of one site), for "did you mean" on a 404."""
    qs = model.objects.all() if site_id is None else model.objects.filter(site_id=site_id)
    return list(qs.values_list("code", flat=True))


def buses_queryset(*, site_id: int) -> QuerySet:
    """A site's buses with their fault levels."""
    return models.Bus.objects.filter(site_id=site_id)


def equipment_queryset(*, site_id: int) -> QuerySet:
    """A site's primary equipment with the bus each is on."""
    return models.Equipment.objects.filter(site_id=site_id).select_related("bus")


def terminal_blocks_queryset(*, site_id: int) -> QuerySet:
    """A site's terminal blocks."""
    return models.TerminalBlock.objects.filter(site_id=site_id)


def wires_queryset(*, site_id: int) -> QuerySet:
    """A site's wires with the terminals at their ends."""
    return models.Wire.objects.filter(site_id=site_id).select_related(
        "from_terminal", "to_terminal"
    )


def links_queryset(*, site_id: int) -> QuerySet:
    """A site's zero-impedance links with the terminals they join."""
    return models.Link.objects.filter(site_id=site_id).select_related("a", "b")


def grounds_queryset(*, site_id: int) -> QuerySet:
    """A site's ground points with their terminals."""
    return models.Ground.objects.filter(site_id=site_id).select_related("terminal")


def switches_queryset(*, site_id: int) -> QuerySet:
    """A site's switches with their positions in order and their contacts (and the terminals
    those join), in the order they were recorded."""
    return models.Switch.objects.filter(site_id=site_id).prefetch_related(
        Prefetch("positions", queryset=models.SwitchPosition.objects.order_by("order")),
        Prefetch(
            "contacts",
            queryset=models.SwitchContact.objects.select_related("a", "b").order_by("id"),
        ),
    )
