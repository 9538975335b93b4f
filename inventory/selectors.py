"""Reads of the physical record.

``site_documents`` turns any number of stored sites into site-file documents (``loopkeep.site/1``)
with a constant number of queries (one per table, whatever the number of sites): the export, the
engine's input and the fleet recompute all read through it.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Iterable
from typing import Any

from django.db.models import Model, OuterRef, Prefetch, QuerySet, Subquery
from django.db.models.functions import Abs

from inventory import models

SITE_FORMAT = "loopkeep.site/1"


def num(value: float | int | None) -> float | int | None:
    """A stored float as the site file writes it: integral values without a fractional part,
    so that export → import → export is byte-identical."""
    if value is None or isinstance(value, bool):
        return value
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return int(value)
    return value


def _put(target: dict[str, Any], key: str, value: Any, *, skip: Any = None) -> None:
    if value is None or value == skip:
        return
    target[key] = num(value) if isinstance(value, float | int) else value


def site_by_code(code: str) -> models.Site:
    return models.Site.objects.get(code=code)


def site_documents(site_ids: Iterable[int]) -> dict[int, dict]:
    """The site documents of the given sites, keyed by site id, in the canonical order the
    export writes (codes sorted; wires, links and contacts in the order they were recorded).
    One query per table, whatever the number of sites."""
    site_rows = list(models.Site.objects.filter(pk__in=list(site_ids)).order_by("code").values())
    ids = [row["id"] for row in site_rows]
    docs: dict[int, dict] = {}
    for row in site_rows:
        site: dict[str, Any] = {
            "code": row["code"],
            "name": row["name"],
            "design_temp_c": num(row["design_temp_c"]),
        }
        _put(site, "notes", row["notes"], skip="")
        docs[row["id"]] = {
            "format": SITE_FORMAT,
            "site": site,
            "buses": [],
            "equipment": [],
            "terminal_blocks": [],
            "cts": [],
            "devices": [],
            "wires": [],
            "links": [],
            "grounds": [],
            "switches": [],
            "procedures": [],
        }

    labels: dict[int, str] = {}
    ct_terminals: dict[int, list[dict]] = defaultdict(list)
    for tid, owner, name, ct_id, position_a, tap_role in models.Terminal.objects.filter(
        site_id__in=ids
    ).values_list("id", "owner", "name", "ct_id", "position_a", "tap_role"):
        labels[tid] = f"{owner}:{name}"
        if ct_id is not None:
            ct_terminals[ct_id].append(
                {"name": name, "position_a": position_a, "tap_role": tap_role}
            )
    label = labels.__getitem__

    bus_codes: dict[int, str] = {}
    for bus in models.Bus.objects.filter(site_id__in=ids).order_by("code").values():
        bus_codes[bus["id"]] = bus["code"]
        entry: dict[str, Any] = {"code": bus["code"]}
        for key in ("kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r"):
            _put(entry, key, bus[key])
        docs[bus["site_id"]]["buses"].append(entry)

    equipment_codes: dict[int, str] = {}
    for eq in models.Equipment.objects.filter(site_id__in=ids).order_by("code").values():
        equipment_codes[eq["id"]] = eq["code"]
        entry = {"code": eq["code"], "kind": eq["kind"]}
        if eq["bus_id"]:
            entry["bus"] = bus_codes[eq["bus_id"]]
        entry["in_service"] = eq["in_service"]
        _put(entry, "max_load_a", eq["max_load_a"])
        docs[eq["site_id"]]["equipment"].append(entry)

    for tb in models.TerminalBlock.objects.filter(site_id__in=ids).order_by("code").values():
        entry = {"code": tb["code"]}
        _put(entry, "description", tb["description"], skip="")
        docs[tb["site_id"]]["terminal_blocks"].append(entry)

    tap_changes: dict[int, list[dict]] = defaultdict(list)
    for change in (
        models.TapChange.objects.filter(ct__site_id__in=ids).order_by("changed_at", "id").values()
    ):
        event: dict[str, Any] = {
            "from": change["from_tap"],
            "to": change["to_tap"],
            "at": change["changed_at"].isoformat().replace("+00:00", "Z"),
        }
        _put(event, "by", change["changed_by"], skip="")
        _put(event, "reason", change["reason"], skip="")
        tap_changes[change["ct_id"]].append(event)

    for ct in models.CurrentTransformer.objects.filter(site_id__in=ids).order_by("code").values():
        own = sorted(ct_terminals[ct["id"]], key=lambda t: (t["position_a"], t["name"]))
        roles = {t["tap_role"]: t["name"] for t in own if t["tap_role"]}
        entry = {
            "code": ct["code"],
            "equipment": equipment_codes[ct["equipment_id"]],
            "phase": ct["phase"],
        }
        _put(entry, "set", ct["set_name"], skip="")
        entry["secondary_a"] = ct["secondary_a"]
        entry["terminals"] = {t["name"]: num(t["position_a"]) for t in own}
        entry["in_use"] = [roles.get("first"), roles.get("second")]
        _put(entry, "accuracy", ct["accuracy"], skip="")
        _put(entry, "rated_burden_va", ct["rated_burden_va"])
        _put(entry, "knee_v", ct["knee_v"])
        _put(entry, "winding_ohm", ct["winding_ohm"])
        _put(entry, "rating_factor", ct["rating_factor"])
        if ct["excitation"] is not None:
            entry["excitation"] = [[num(a), num(v)] for a, v in ct["excitation"]]
        _put(entry, "nameplate", ct["nameplate"], skip="")
        if tap_changes.get(ct["id"]):
            entry["tap_changes"] = tap_changes[ct["id"]]
        docs[ct["site_id"]]["cts"].append(entry)

    inputs: dict[int, list[dict]] = defaultdict(list)
    for inp in models.DeviceInput.objects.filter(device__site_id__in=ids).order_by("id").values():
        entry = {
            "name": inp["name"],
            "from": label(inp["from_terminal_id"]),
            "to": label(inp["to_terminal_id"]),
            "rated_a": inp["rated_a"],
        }
        if inp["burden_va"] is not None:
            entry["burden_va"] = num(inp["burden_va"])
            entry["pf"] = num(inp["pf"])
        else:
            entry["burden_ohm"] = [num(inp["burden_r_ohm"]), num(inp["burden_x_ohm"])]
        inputs[inp["device_id"]].append(entry)
    outputs: dict[int, list[dict]] = defaultdict(list)
    for out in models.DeviceOutput.objects.filter(device__site_id__in=ids).order_by("id").values():
        outputs[out["device_id"]].append(
            {
                "name": out["name"],
                "terminal": label(out["terminal_id"]),
                "target": label(out["target_id"]),
            }
        )
    for dev in models.Device.objects.filter(site_id__in=ids).order_by("code").values():
        entry = {"code": dev["code"], "kind": dev["kind"]}
        if dev["functions"]:
            entry["functions"] = dev["functions"]
        _put(entry, "ratio_setting", dev["ratio_setting"], skip="")
        entry["inputs"] = inputs.get(dev["id"], [])
        if outputs.get(dev["id"]):
            entry["outputs"] = outputs[dev["id"]]
        docs[dev["site_id"]]["devices"].append(entry)

    # The largest tables of a site are read as tuples: dict rows cost more than the query.
    for site_id, a, b, size, material, length_m, length_ft, r_ohm in (
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
        entry = {"from": labels[a], "to": labels[b]}
        if size:
            entry["size"] = size
        if material != "cu":
            entry["material"] = material
        if length_m is not None:
            entry["length_m"] = num(length_m)
        if length_ft is not None:
            entry["length_ft"] = num(length_ft)
        if r_ohm is not None:
            entry["r_ohm"] = num(r_ohm)
        docs[site_id]["wires"].append(entry)

    for link in models.Link.objects.filter(site_id__in=ids).order_by("id").values():
        docs[link["site_id"]]["links"].append([label(link["a_id"]), label(link["b_id"])])
    for ground in models.Ground.objects.filter(site_id__in=ids).order_by("id").values():
        docs[ground["site_id"]]["grounds"].append(label(ground["terminal_id"]))

    positions: dict[int, list[dict]] = defaultdict(list)
    for switch_id, name, is_normal in (
        models.SwitchPosition.objects.filter(switch__site_id__in=ids)
        .order_by("switch_id", "order")
        .values_list("switch_id", "name", "is_normal")
    ):
        positions[switch_id].append({"name": name, "is_normal": is_normal})
    contacts: dict[int, list[dict]] = defaultdict(list)
    for switch_id, a, b, closed_in in (
        models.SwitchContact.objects.filter(switch__site_id__in=ids)
        .order_by("id")
        .values_list("switch_id", "a_id", "b_id", "closed_in")
    ):
        contacts[switch_id].append({"between": [labels[a], labels[b]], "closed_in": closed_in})
    for sw in models.Switch.objects.filter(site_id__in=ids).order_by("code").values():
        own_positions = positions.get(sw["id"], [])
        normal = next((p["name"] for p in own_positions if p["is_normal"]), None)
        docs[sw["site_id"]]["switches"].append(
            {
                "code": sw["code"],
                "kind": sw["kind"],
                "positions": [p["name"] for p in own_positions],
                "normal": normal,
                "transition": sw["transition"],
                "contacts": contacts.get(sw["id"], []),
            }
        )

    steps: dict[int, list[dict]] = defaultdict(list)
    for step in (
        models.ProcedureStep.objects.filter(procedure__site_id__in=ids)
        .order_by("procedure_id", "order")
        .values("procedure_id", "op")
    ):
        steps[step["procedure_id"]].append(step["op"])
    for proc in models.Procedure.objects.filter(site_id__in=ids).order_by("code").values():
        entry = {"code": proc["code"], "title": proc["title"]}
        _put(entry, "author", proc["author"], skip="")
        entry["devices"] = proc["devices"]
        entry["steps"] = steps.get(proc["id"], [])
        docs[proc["site_id"]]["procedures"].append(entry)

    for doc in docs.values():
        for key in ("terminal_blocks", "links", "grounds", "procedures"):
            if not doc[key]:
                del doc[key]
    return docs


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
