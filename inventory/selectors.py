"""Reads of the physical record.

``site_records`` reads any number of stored sites as typed records (``record.SiteRecord``) with
a constant number of queries (one per table, whatever the number of sites): the engine's input
and the fleet recompute read through it, and the export (``site_documents``) serialises it.
"""

from __future__ import annotations

import json
from collections import defaultdict
from collections.abc import Iterable
from typing import Any

from django.db import connection
from django.db.models import Model, OuterRef, Prefetch, QuerySet, Subquery
from django.db.models.functions import Abs

import record as rec
from inventory import models

# The site file's number form (integral floats as integers), used by the API too.
num = rec.document.num

SITE_FORMAT = rec.model.SITE_FORMAT
_SECTIONS = (
    "buses",
    "equipment",
    "terminal_blocks",
    "cts",
    "devices",
    "wires",
    "links",
    "grounds",
    "switches",
    "procedures",
)


def _rows(qs: QuerySet) -> list[tuple[Any, ...]]:
    """The rows of a ``values_list`` query as the database driver gives them: no per-value
    converters (JSON columns come back as their text, booleans as the driver's; the caller
    decodes what it reads). The record read's rows are plain numbers, strings and ids, and
    the converters cost more than the query."""
    sql, params = qs.query.sql_with_params()
    with connection.cursor() as cursor:
        cursor.execute(sql, params)
        return cursor.fetchall()


class _Decoded:
    """JSON column text -> the value ``convert`` makes of it, decoded once per distinct text
    (a switch contact's ``["closed"]``, a relay's functions, a step repeat across the fleet).
    The values are immutable (tuples, typed operations), so sharing them is safe."""

    __slots__ = ("_convert", "_memo")

    def __init__(self, convert: Any) -> None:
        self._memo: dict[Any, Any] = {}
        self._convert = convert

    def __call__(self, raw: Any) -> Any:
        if raw is None:
            return None
        hit = self._memo.get(raw)
        if hit is None:
            value = json.loads(raw) if isinstance(raw, (str, bytes)) else raw
            hit = self._memo[raw] = self._convert(value)
        return hit


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
    the query)."""
    site_rows = list(
        models.Site.objects.filter(pk__in=list(site_ids))
        .order_by("code")
        .values_list("id", "code", "name", "design_temp_c", "notes")
    )
    ids = [row[0] for row in site_rows]
    sections: dict[int, dict[str, list[Any]]] = {sid: {k: [] for k in _SECTIONS} for sid in ids}

    labels: dict[int, str] = {}
    ct_terminals: dict[int, list[tuple[float, str, str]]] = defaultdict(list)
    for tid, owner, name, ct_id, position_a, tap_role in _rows(
        models.Terminal.objects.filter(site_id__in=ids).values_list(
            "id", "owner", "name", "ct_id", "position_a", "tap_role"
        )
    ):
        labels[tid] = f"{owner}:{name}"
        if ct_id is not None:
            ct_terminals[ct_id].append((position_a, name, tap_role))

    bus_codes: dict[int, str] = {}
    for bid, site_id, code, kv, three, ground, xr in (
        models.Bus.objects.filter(site_id__in=ids)
        .order_by("code")
        .values_list(
            "id", "site_id", "code", "kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r"
        )
    ):
        bus_codes[bid] = code
        sections[site_id]["buses"].append(rec.Bus(code, kv, three, ground, xr))

    equipment_codes: dict[int, str] = {}
    for eid, site_id, code, kind, bus_id, in_service, max_load_a in (
        models.Equipment.objects.filter(site_id__in=ids)
        .order_by("code")
        .values_list("id", "site_id", "code", "kind", "bus_id", "in_service", "max_load_a")
    ):
        equipment_codes[eid] = code
        bus = bus_codes[bus_id] if bus_id else None
        sections[site_id]["equipment"].append(
            rec.Equipment(code, kind, bus, in_service, max_load_a)
        )

    for site_id, code, description in (
        models.TerminalBlock.objects.filter(site_id__in=ids)
        .order_by("code")
        .values_list("site_id", "code", "description")
    ):
        sections[site_id]["terminal_blocks"].append(rec.TerminalBlock(code, description))

    tap_changes: dict[int, list[rec.TapChange]] = defaultdict(list)
    for ct_id, from_tap, to_tap, changed_at, by, reason in (
        models.TapChange.objects.filter(ct__site_id__in=ids)
        .order_by("changed_at", "id")
        .values_list("ct_id", "from_tap", "to_tap", "changed_at", "changed_by", "reason")
    ):
        tap_changes[ct_id].append(
            rec.TapChange(tuple(from_tap), tuple(to_tap), changed_at, by, reason)
        )

    points = _Decoded(_points)
    for row in _rows(
        models.CurrentTransformer.objects.filter(site_id__in=ids)
        .order_by("code")
        .values_list(
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
        )
    ):
        (ct_id, site_id, code, eq_id, phase, set_name, secondary_a, accuracy) = row[:8]
        (rated_burden_va, knee_v, winding_ohm, rating_factor, excitation, nameplate) = row[8:]
        own = sorted(ct_terminals.get(ct_id, ()))
        roles = {role: name for _, name, role in own if role}
        sections[site_id]["cts"].append(
            rec.CT(
                code=code,
                equipment=equipment_codes[eq_id],
                phase=phase,
                secondary_a=float(secondary_a),
                terminals=tuple((name, position) for position, name, _ in own),
                in_use=tuple(roles[r] for r in ("first", "second") if r in roles),
                set_name=set_name or None,
                accuracy=accuracy or None,
                rated_burden_va=rated_burden_va,
                knee_v=knee_v,
                winding_ohm=winding_ohm,
                rating_factor=rating_factor,
                excitation=points(excitation),
                nameplate=nameplate,
                tap_changes=tuple(tap_changes.get(ct_id, ())),
            )
        )

    inputs: dict[int, list[rec.DeviceInput]] = defaultdict(list)
    for device_id, name, a, b, rated_a, burden_va, pf, r_ohm, x_ohm in _rows(
        models.DeviceInput.objects.filter(device__site_id__in=ids)
        .order_by("id")
        .values_list(
            "device_id",
            "name",
            "from_terminal_id",
            "to_terminal_id",
            "rated_a",
            "burden_va",
            "pf",
            "burden_r_ohm",
            "burden_x_ohm",
        )
    ):
        inputs[device_id].append(
            rec.DeviceInput(
                name=name,
                from_terminal=labels[a],
                to_terminal=labels[b],
                rated_a=float(rated_a),
                burden_va=burden_va,
                pf=pf,
                burden_ohm=None if burden_va is not None else (r_ohm, x_ohm),
            )
        )
    outputs: dict[int, list[rec.DeviceOutput]] = defaultdict(list)
    for device_id, name, terminal, target in _rows(
        models.DeviceOutput.objects.filter(device__site_id__in=ids)
        .order_by("id")
        .values_list("device_id", "name", "terminal_id", "target_id")
    ):
        outputs[device_id].append(rec.DeviceOutput(name, labels[terminal], labels[target]))
    tuple_of = _Decoded(_tuple)
    for did, site_id, code, kind, functions, ratio_setting in _rows(
        models.Device.objects.filter(site_id__in=ids)
        .order_by("code")
        .values_list("id", "site_id", "code", "kind", "functions", "ratio_setting")
    ):
        sections[site_id]["devices"].append(
            rec.Device(
                code=code,
                kind=kind,
                functions=tuple_of(functions) or (),
                ratio_setting=ratio_setting or None,
                inputs=tuple(inputs.get(did, ())),
                outputs=tuple(outputs.get(did, ())),
            )
        )

    wire = rec.Wire
    for site_id, a, b, size, material, length_m, length_ft, r_ohm in _rows(
        models.Wire.objects.filter(site_id__in=ids)
        .order_by("id")
        .values_list(
            "site_id",
            "from_terminal_id",
            "to_terminal_id",
            "size",
            "material",
            "length_m",
            "length_ft",
            "r_ohm",
        )
    ):
        sections[site_id]["wires"].append(
            wire(labels[a], labels[b], size, material, length_m, length_ft, r_ohm)
        )

    for site_id, a, b in _rows(
        models.Link.objects.filter(site_id__in=ids)
        .order_by("id")
        .values_list("site_id", "a_id", "b_id")
    ):
        sections[site_id]["links"].append(rec.Link(labels[a], labels[b]))
    for site_id, terminal in _rows(
        models.Ground.objects.filter(site_id__in=ids)
        .order_by("id")
        .values_list("site_id", "terminal_id")
    ):
        sections[site_id]["grounds"].append(labels[terminal])

    positions: dict[int, list[tuple[str, bool]]] = defaultdict(list)
    for switch_id, name, is_normal in _rows(
        models.SwitchPosition.objects.filter(switch__site_id__in=ids)
        .order_by("switch_id", "order")
        .values_list("switch_id", "name", "is_normal")
    ):
        positions[switch_id].append((name, bool(is_normal)))
    contacts: dict[int, list[rec.Contact]] = defaultdict(list)
    for switch_id, a, b, closed_in in _rows(
        models.SwitchContact.objects.filter(switch__site_id__in=ids)
        .order_by("id")
        .values_list("switch_id", "a_id", "b_id", "closed_in")
    ):
        contacts[switch_id].append(rec.Contact((labels[a], labels[b]), tuple_of(closed_in)))
    for sw_id, site_id, code, kind, transition in _rows(
        models.Switch.objects.filter(site_id__in=ids)
        .order_by("code")
        .values_list("id", "site_id", "code", "kind", "transition")
    ):
        own_positions = positions.get(sw_id, [])
        sections[site_id]["switches"].append(
            rec.Switch(
                code=code,
                kind=kind,
                positions=tuple(name for name, _ in own_positions),
                normal=next((name for name, normal in own_positions if normal), None),
                transition=transition,
                contacts=tuple(contacts.get(sw_id, ())),
            )
        )

    steps: dict[int, list[rec.Operation]] = defaultdict(list)
    operation = _Decoded(rec.operation_from_json)
    for procedure_id, order, op in _rows(
        models.ProcedureStep.objects.filter(procedure__site_id__in=ids)
        .order_by("procedure_id", "order")
        .values_list("procedure_id", "order", "op")
    ):
        try:
            steps[procedure_id].append(operation(op))
        except rec.OperationError as err:
            raise rec.RecordError(f"procedure step {order} (id {procedure_id}): {err}") from err
    for pid, site_id, code, title, author, devices in _rows(
        models.Procedure.objects.filter(site_id__in=ids)
        .order_by("code")
        .values_list("id", "site_id", "code", "title", "author", "devices")
    ):
        sections[site_id]["procedures"].append(
            rec.Procedure(
                code=code,
                title=title,
                steps=tuple(steps.get(pid, ())),
                author=author,
                devices=tuple_of(devices) or (),
            )
        )

    return {
        sid: rec.SiteRecord(
            site=rec.Site(code, name, design_temp_c, notes),
            **{k: tuple(v) for k, v in sections[sid].items()},
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
