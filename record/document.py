"""The site file (``loopkeep.site/1``) ↔ the typed record.

``record_from_document`` is built once, after validation (``inventory.sitefile``); it converts
types and fills the site file's defaults as the importer stores them, and checks nothing else
(the validator and the record's rules do). It stays lenient on the shape of what it does not
need to understand, so that the engine's own hand-built test circuits convert too.
``record_to_document`` writes the document the export writes: integral numbers without a
fractional part, optional values left out when empty, so that export → import → export is
byte-identical. ``canonical`` puts a record in the export's order.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import replace
from datetime import UTC, datetime
from typing import Any

from record.gcpause import gc_paused
from record.model import (
    CT,
    DEFAULT_DESIGN_TEMP_C,
    SITE_FORMAT,
    Bus,
    Contact,
    Device,
    DeviceInput,
    DeviceOutput,
    Equipment,
    Link,
    Procedure,
    RatioSetting,
    Site,
    SiteRecord,
    Switch,
    TapChange,
    TerminalBlock,
    Wire,
)
from record.operations import OperationError, operation_from_json


class RecordError(ValueError):
    """A document that cannot be turned into a record; the message starts with the JSON
    pointer of the part."""


def _f(value: Any) -> float | None:
    """A number of the document as a float (None stays None; booleans and text stay what they
    are, for the ratings to report as missing)."""
    if value is None or isinstance(value, bool) or not isinstance(value, int | float):
        return None if value is None or value == "" else value
    return float(value)


def _s(value: Any) -> str | None:
    return None if value is None or value == "" else str(value)


def _strings(values: Any) -> tuple[str, ...]:
    if values is None:
        return ()
    if isinstance(values, str):
        return (values,)
    return tuple(str(v) for v in values)


def _ratio_setting(value: Any) -> RatioSetting | None:
    if value is None or value == "":
        return None
    if isinstance(value, Mapping):
        return {str(k): str(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return tuple(str(v) for v in value)
    return str(value)


def _items(doc: Mapping[str, Any], section: str) -> Iterable[tuple[int, Any]]:
    return enumerate(doc.get(section) or ())


def _ct(c: Mapping[str, Any], where: str) -> CT:
    terminals = c.get("terminals") or {}
    excitation = c.get("excitation")
    secondary = c.get("secondary_a")
    rating_factor = c.get("rating_factor")
    return CT(
        code=str(c["code"]),
        equipment=_s(c.get("equipment")),
        phase=_s(c.get("phase")),
        set_name=_s(c.get("set")),
        secondary_a=5.0 if secondary is None else float(secondary),
        terminals=tuple((str(n), float(p)) for n, p in terminals.items()),
        in_use=_strings(c.get("in_use")),
        accuracy=_s(c.get("accuracy")),
        rated_burden_va=_f(c.get("rated_burden_va")),
        knee_v=_f(c.get("knee_v")),
        winding_ohm=_f(c.get("winding_ohm")),
        rating_factor=1.0 if rating_factor is None else _f(rating_factor),  # type: ignore[arg-type]
        excitation=(tuple((float(a), float(v)) for a, v in excitation) if excitation else None),
        nameplate=str(c.get("nameplate") or ""),
        tap_changes=tuple(
            TapChange(
                from_tap=_strings(e.get("from")),
                to_tap=_strings(e.get("to")),
                at=_utc(e.get("at"), f"{where}/tap_changes/{n}/at"),
                by=str(e.get("by") or ""),
                reason=str(e.get("reason") or ""),
            )
            for n, e in enumerate(c.get("tap_changes") or ())
        ),
    )


def _utc(value: Any, where: str) -> datetime:
    """An ISO 8601 date-time as an aware UTC datetime (a time without an offset is UTC, as the
    importer stores it)."""
    try:
        at = datetime.fromisoformat(str(value))
    except ValueError as err:
        raise RecordError(f"{where}: {value!r} is not an ISO 8601 date-time") from err
    return at.replace(tzinfo=UTC) if at.tzinfo is None else at.astimezone(UTC)


def iso_utc(at: datetime) -> str:
    """A date-time as the site file writes it: ISO 8601 in UTC with ``Z``."""
    return at.astimezone(UTC).isoformat().replace("+00:00", "Z")


def _input(spec: Mapping[str, Any], m: int) -> DeviceInput:
    burden_va = _f(spec.get("burden_va"))
    pf = spec.get("pf")
    ohm = spec.get("burden_ohm")
    return DeviceInput(
        name=str(spec.get("name") or f"I{m + 1}"),
        from_terminal=spec.get("from"),  # type: ignore[arg-type]
        to_terminal=spec.get("to"),  # type: ignore[arg-type]
        rated_a=_f(spec.get("rated_a")),
        burden_va=burden_va,
        # The site file's power factor defaults to 1.0 (resistive) where VA is given.
        pf=_f(pf) if pf is not None else (1.0 if burden_va is not None else None),
        burden_ohm=None if ohm is None else (float(ohm[0]), float(ohm[1])),
    )


def _device(d: Mapping[str, Any]) -> Device:
    return Device(
        code=str(d["code"]),
        kind=str(d.get("kind") or "other"),
        functions=_strings(d.get("functions")),
        ratio_setting=_ratio_setting(d.get("ratio_setting")),
        inputs=tuple(_input(spec, m) for m, spec in enumerate(d.get("inputs") or ())),
        outputs=tuple(
            DeviceOutput(
                name=str(spec.get("name") or f"OUT{m + 1}"),
                terminal=spec.get("terminal"),
                target=spec.get("target"),
            )
            for m, spec in enumerate(d.get("outputs") or ())
        ),
    )


def _wire(w: Mapping[str, Any]) -> Wire:
    return Wire(
        from_terminal=w.get("from"),  # type: ignore[arg-type]
        to_terminal=w.get("to"),  # type: ignore[arg-type]
        size=str(w.get("size") or ""),
        material=str(w.get("material") or "cu"),
        length_m=_f(w.get("length_m")),
        length_ft=_f(w.get("length_ft")),
        r_ohm=_f(w.get("r_ohm")),
    )


def _link(pair: Any, k: int) -> Link:
    if isinstance(pair, Mapping):
        pair = pair.get("between") or [pair.get("from"), pair.get("to")]
    if not isinstance(pair, list | tuple) or len(pair) != 2:
        raise RecordError(f"/links/{k}: a link joins exactly two terminals")
    return Link(a=pair[0], b=pair[1])


def _switch(s: Mapping[str, Any]) -> Switch:
    return Switch(
        code=str(s["code"]),
        kind=str(s.get("kind") or "other"),
        positions=_strings(s.get("positions")),
        normal=_s(s.get("normal")),
        transition=str(s.get("transition") or "break_before_make"),
        contacts=tuple(
            Contact(between=tuple(c.get("between") or ()), closed_in=_strings(c.get("closed_in")))
            for c in s.get("contacts") or ()
        ),
    )


def _procedure(p: Mapping[str, Any], k: int) -> Procedure:
    steps = []
    for n, op in enumerate(p.get("steps") or ()):
        try:
            steps.append(operation_from_json(op))
        except OperationError as err:
            raise RecordError(f"/procedures/{k}/steps/{n}: {err}") from err
    return Procedure(
        code=str(p["code"]),
        title=str(p.get("title") or ""),
        author=str(p.get("author") or ""),
        devices=_strings(p.get("devices")),
        steps=tuple(steps),
    )


def record_from_document(doc: Mapping[str, Any]) -> SiteRecord:
    """The typed record of a ``loopkeep.site/1`` document (validated first, see
    ``inventory.sitefile.validate_site_document``). Raises ``RecordError`` naming the JSON
    pointer of a part that has no typed form (a procedure step that is no operation, a link
    that is not two terminals)."""
    with gc_paused():  # some thousand small frozen objects, none in a cycle
        return _record_from_document(doc)


def _record_from_document(doc: Mapping[str, Any]) -> SiteRecord:
    site = doc.get("site") or {}
    temp = site.get("design_temp_c")
    return SiteRecord(
        site=Site(
            code=str(site.get("code") or ""),
            name=str(site.get("name") or ""),
            design_temp_c=DEFAULT_DESIGN_TEMP_C if temp is None else float(temp),
            notes=str(site.get("notes") or ""),
        ),
        buses=tuple(
            Bus(
                code=str(b["code"]),
                kv=_f(b.get("kv")),
                three_phase_fault_ka=_f(b.get("three_phase_fault_ka")),
                ground_fault_ka=_f(b.get("ground_fault_ka")),
                x_over_r=_f(b.get("x_over_r")),
            )
            for b in doc.get("buses") or ()
        ),
        equipment=tuple(
            Equipment(
                code=str(e["code"]),
                kind=str(e.get("kind") or "other"),
                bus=_s(e.get("bus")),
                in_service=bool(e.get("in_service", True)),
                max_load_a=_f(e.get("max_load_a")),
            )
            for e in doc.get("equipment") or ()
        ),
        terminal_blocks=tuple(
            TerminalBlock(code=str(t["code"]), description=str(t.get("description") or ""))
            for t in doc.get("terminal_blocks") or ()
        ),
        cts=tuple(_ct(c, f"/cts/{k}") for k, c in _items(doc, "cts")),
        devices=tuple(_device(d) for d in doc.get("devices") or ()),
        wires=tuple(_wire(w) for w in doc.get("wires") or ()),
        links=tuple(_link(pair, k) for k, pair in _items(doc, "links")),
        grounds=tuple(doc.get("grounds") or ()),
        switches=tuple(_switch(s) for s in doc.get("switches") or ()),
        procedures=tuple(_procedure(p, k) for k, p in _items(doc, "procedures")),
    )


def as_record(source: SiteRecord | Mapping[str, Any]) -> SiteRecord:
    """A record as it is, or the record of a site document."""
    return source if isinstance(source, SiteRecord) else record_from_document(source)


# --- export --------------------------------------------------------------------------------


def num(value: Any) -> Any:
    """A number as the site file writes it: integral values without a fractional part, so that
    export → import → export is byte-identical."""
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return int(value)
    return value


def _ct_json(ct: CT) -> dict[str, Any]:
    entry: dict[str, Any] = {"code": ct.code, "equipment": ct.equipment, "phase": ct.phase}
    if ct.set_name:
        entry["set"] = ct.set_name
    entry["secondary_a"] = num(ct.secondary_a)
    entry["terminals"] = {name: num(p) for name, p in ct.terminals}
    entry["in_use"] = list(ct.in_use)
    if ct.accuracy:
        entry["accuracy"] = ct.accuracy
    for key in ("rated_burden_va", "knee_v", "winding_ohm", "rating_factor"):
        value = getattr(ct, key)
        if value is not None:
            entry[key] = num(value)
    if ct.excitation is not None:
        entry["excitation"] = [[num(a), num(v)] for a, v in ct.excitation]
    if ct.nameplate:
        entry["nameplate"] = ct.nameplate
    if ct.tap_changes:
        changes = []
        for e in ct.tap_changes:
            event: dict[str, Any] = {
                "from": list(e.from_tap),
                "to": list(e.to_tap),
                "at": iso_utc(e.at),
            }
            if e.by:
                event["by"] = e.by
            if e.reason:
                event["reason"] = e.reason
            changes.append(event)
        entry["tap_changes"] = changes
    return entry


def _input_json(i: DeviceInput) -> dict[str, Any]:
    entry: dict[str, Any] = {
        "name": i.name,
        "from": i.from_terminal,
        "to": i.to_terminal,
        "rated_a": num(i.rated_a),
    }
    if i.burden_va is not None:
        entry["burden_va"] = num(i.burden_va)
        entry["pf"] = num(i.pf)
    else:
        r, x = i.burden_ohm if i.burden_ohm is not None else (None, None)
        entry["burden_ohm"] = [num(r), num(x)]
    return entry


def _device_json(d: Device) -> dict[str, Any]:
    entry: dict[str, Any] = {"code": d.code, "kind": d.kind}
    if d.functions:
        entry["functions"] = list(d.functions)
    setting = d.ratio_setting
    if setting:
        entry["ratio_setting"] = (
            setting
            if isinstance(setting, str)
            else list(setting)
            if isinstance(setting, tuple)
            else dict(setting)
        )
    entry["inputs"] = [_input_json(i) for i in d.inputs]
    if d.outputs:
        entry["outputs"] = [
            {"name": o.name, "terminal": o.terminal, "target": o.target} for o in d.outputs
        ]
    return entry


def _wire_json(w: Wire) -> dict[str, Any]:
    entry: dict[str, Any] = {"from": w.from_terminal, "to": w.to_terminal}
    if w.size:
        entry["size"] = w.size
    if w.material != "cu":
        entry["material"] = w.material
    if w.length_m is not None:
        entry["length_m"] = num(w.length_m)
    if w.length_ft is not None:
        entry["length_ft"] = num(w.length_ft)
    if w.r_ohm is not None:
        entry["r_ohm"] = num(w.r_ohm)
    return entry


def record_to_document(record: SiteRecord) -> dict[str, Any]:
    """The ``loopkeep.site/1`` document of a record, as the export writes it (sections in the
    record's order; ``terminal_blocks``, ``links``, ``grounds`` and ``procedures`` left out when
    empty)."""
    s = record.site
    site: dict[str, Any] = {"code": s.code, "name": s.name, "design_temp_c": num(s.design_temp_c)}
    if s.notes:
        site["notes"] = s.notes
    buses = []
    for b in record.buses:
        entry: dict[str, Any] = {"code": b.code}
        for key in ("kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r"):
            value = getattr(b, key)
            if value is not None:
                entry[key] = num(value)
        buses.append(entry)
    equipment = []
    for e in record.equipment:
        entry = {"code": e.code, "kind": e.kind}
        if e.bus:
            entry["bus"] = e.bus
        entry["in_service"] = e.in_service
        if e.max_load_a is not None:
            entry["max_load_a"] = num(e.max_load_a)
        equipment.append(entry)
    blocks = []
    for t in record.terminal_blocks:
        entry = {"code": t.code}
        if t.description:
            entry["description"] = t.description
        blocks.append(entry)
    doc: dict[str, Any] = {
        "format": SITE_FORMAT,
        "site": site,
        "buses": buses,
        "equipment": equipment,
        "terminal_blocks": blocks,
        "cts": [_ct_json(c) for c in record.cts],
        "devices": [_device_json(d) for d in record.devices],
        "wires": [_wire_json(w) for w in record.wires],
        "links": [[k.a, k.b] for k in record.links],
        "grounds": list(record.grounds),
        "switches": [
            {
                "code": sw.code,
                "kind": sw.kind,
                "positions": list(sw.positions),
                "normal": sw.normal,
                "transition": sw.transition,
                "contacts": [
                    {"between": list(c.between), "closed_in": list(c.closed_in)}
                    for c in sw.contacts
                ],
            }
            for sw in record.switches
        ],
        "procedures": [_procedure_json(p) for p in record.procedures],
    }
    for key in ("terminal_blocks", "links", "grounds", "procedures"):
        if not doc[key]:
            del doc[key]
    return doc


def _procedure_json(p: Procedure) -> dict[str, Any]:
    entry: dict[str, Any] = {"code": p.code, "title": p.title}
    if p.author:
        entry["author"] = p.author
    entry["devices"] = list(p.devices)
    entry["steps"] = [op.to_json() for op in p.steps]
    return entry


def canonical(record: SiteRecord) -> SiteRecord:
    """The record in the export's order: coded parts sorted by code, each CT's terminals by
    position then name (wires, links, grounds, contacts, inputs, outputs, positions and steps
    keep their order, which carries meaning or is the order they were recorded in)."""

    def by_code(items: tuple[Any, ...]) -> tuple[Any, ...]:
        return tuple(sorted(items, key=lambda x: x.code))

    return replace(
        record,
        buses=by_code(record.buses),
        equipment=by_code(record.equipment),
        terminal_blocks=by_code(record.terminal_blocks),
        cts=tuple(
            replace(c, terminals=tuple(sorted(c.terminals, key=lambda t: (t[1], t[0]))))
            for c in by_code(record.cts)
        ),
        devices=by_code(record.devices),
        switches=by_code(record.switches),
        procedures=by_code(record.procedures),
    )
