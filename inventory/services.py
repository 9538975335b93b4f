"""Writes to the physical record. One service per write, each one transaction.

``site_import`` is the one way a whole site comes in (site file, spreadsheet, tests): it
validates the document first (every error, with its JSON pointer) and writes nothing when
anything is wrong; otherwise it upserts by natural key inside one transaction: coded objects and
keyed children are updated in place, created or deleted, so history shows what really changed.
A change of a CT's terminals in use is recorded as a ``TapChange`` event.
"""

from __future__ import annotations

import datetime as dt
from collections import Counter
from collections.abc import Callable, Hashable, Iterable
from dataclasses import dataclass, field
from typing import Any

from django.db import models as djm
from django.db import transaction
from django.db.models import F, Q
from django.utils import timezone
from django.utils.dateparse import parse_datetime
from simple_history.utils import bulk_create_with_history, bulk_update_with_history

from inventory import models


class SiteImportError(ValueError):
    """The document is not a valid site file; ``errors`` lists every problem found."""

    def __init__(self, errors: list[Any]):
        self.errors = [str(e) for e in errors]
        super().__init__("\n".join(self.errors))


@dataclass
class ImportResult:
    """What an import did (or, on a dry run, would do), counted per model."""

    site: str
    dry_run: bool
    created: Counter = field(default_factory=Counter)
    updated: Counter = field(default_factory=Counter)
    deleted: Counter = field(default_factory=Counter)
    tap_changes: list[str] = field(default_factory=list)

    @property
    def changed(self) -> bool:
        return bool(self.created or self.updated or self.deleted)

    def summary(self) -> str:
        def fmt(counter: Counter) -> str:
            return ", ".join(f"{n} {name}" for name, n in sorted(counter.items())) or "nothing"

        verb = "would be" if self.dry_run else "were"
        return (
            f"site {self.site}: created {fmt(self.created)}; updated {fmt(self.updated)}; "
            f"deleted {fmt(self.deleted)} ({verb} written)"
        )


class _DryRunRollback(Exception):
    pass


def _parse_at(text: str) -> dt.datetime:
    value = parse_datetime(text)
    if value is None:
        raise SiteImportError([f"tap change time {text!r} is not an ISO 8601 date-time"])
    if timezone.is_naive(value):
        value = timezone.make_aware(value, dt.UTC)
    return value


class _Sync:
    """Brings the rows of one model in line with the wanted rows, matched by a key: updates in
    place what changed, creates what is new, deletes what is gone. Bulk writes with history."""

    def __init__(self, result: ImportResult, user: Any):
        self.result = result
        self.user = user

    def __call__(
        self,
        model: type[djm.Model],
        existing: Iterable[djm.Model],
        wanted: dict[Hashable, dict[str, Any]],
        key: Callable[[djm.Model], Hashable],
        *,
        delete: bool = True,
    ) -> dict[Hashable, djm.Model]:
        name = model._meta.verbose_name_plural
        current = {key(row): row for row in existing}
        to_update: list[djm.Model] = []
        fields: set[str] = set()
        for k, values in wanted.items():
            row = current.get(k)
            if row is None:
                continue
            changed = [f for f, v in values.items() if getattr(row, f) != v]
            if changed:
                for f in changed:
                    setattr(row, f, values[f])
                fields.update(changed)
                to_update.append(row)
        new_keys = [k for k in wanted if k not in current]
        new_rows = [model(**wanted[k]) for k in new_keys]
        if to_update:
            bulk_update_with_history(
                to_update, model, sorted(fields), batch_size=2000, default_user=self.user
            )
            self.result.updated[name] += len(to_update)
        if new_rows:
            created = bulk_create_with_history(
                new_rows, model, batch_size=2000, default_user=self.user
            )
            self.result.created[name] += len(created)
            if created and created[0].pk is None:  # backends that do not return keys
                raise RuntimeError(f"bulk create of {name} returned no primary keys")
            for k, row in zip(new_keys, created, strict=True):
                current[k] = row
        gone = [k for k in current if k not in wanted]
        if delete and gone:
            model.objects.filter(pk__in=[current[k].pk for k in gone]).delete()
            self.result.deleted[name] += len(gone)
            for k in gone:
                del current[k]
        return current


def _numbered(pairs: Iterable[tuple]) -> list[tuple]:
    """Keys for rows that have no code (wires, links, contacts): the terminals they join plus a
    running count, so two parallel wires between the same points stay two rows."""
    seen: Counter = Counter()
    keys = []
    for pair in pairs:
        seen[pair] += 1
        keys.append((*pair, seen[pair]))
    return keys


def site_import(*, doc: dict, dry_run: bool = False, user: Any = None) -> ImportResult:
    """Validate a ``loopkeep.site/1`` document and upsert the site it describes, atomically.

    Raises ``SiteImportError`` with every error (``JSON-pointer: what is wrong``) and writes
    nothing when the document is not valid. With ``dry_run`` the import runs to the end inside
    the transaction and is rolled back, so the counts say what it would do.
    """
    from inventory.sitefile.validate import validate_site_document

    errors = validate_site_document(doc)
    if errors:
        raise SiteImportError(errors)
    result = ImportResult(site=doc["site"]["code"], dry_run=dry_run)
    try:
        with transaction.atomic():
            _upsert(doc, result, user)
            if dry_run:
                raise _DryRunRollback
    except _DryRunRollback:
        pass
    return result


def _upsert(doc: dict, result: ImportResult, user: Any) -> None:
    sync = _Sync(result, user)
    site_data = doc["site"]
    site = models.Site.objects.select_for_update().filter(code=site_data["code"]).first()
    site_fields = {
        "name": site_data["name"],
        "design_temp_c": float(site_data.get("design_temp_c", 75)),
        "notes": site_data.get("notes", ""),
    }
    if site is None:
        site = models.Site(code=site_data["code"], **site_fields)
        site.save()
        result.created["sites"] += 1
    elif any(getattr(site, k) != v for k, v in site_fields.items()):
        for k, v in site_fields.items():
            setattr(site, k, v)
        site.save()
        result.updated["sites"] += 1
    sid = site.pk

    def by_code(model: type[djm.Model], wanted: dict[str, dict], delete: bool = False) -> dict:
        return sync(
            model,
            model.objects.filter(site_id=sid),
            {code: {"site_id": sid, "code": code, **values} for code, values in wanted.items()},
            key=lambda row: row.code,
            delete=delete,
        )

    def fnum(value: Any) -> float | None:
        return None if value is None else float(value)

    buses = by_code(
        models.Bus,
        {
            b["code"]: {
                k: fnum(b.get(k))
                for k in ("kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r")
            }
            for b in doc.get("buses", [])
        },
    )
    equipment = by_code(
        models.Equipment,
        {
            e["code"]: {
                "kind": e["kind"],
                "bus_id": buses[e["bus"]].pk if e.get("bus") else None,
                "in_service": e.get("in_service", True),
                "max_load_a": fnum(e.get("max_load_a")),
            }
            for e in doc.get("equipment", [])
        },
    )
    by_code(
        models.TerminalBlock,
        {
            tb["code"]: {"description": tb.get("description", "")}
            for tb in doc.get("terminal_blocks", [])
        },
        delete=True,
    )
    cts = by_code(
        models.CurrentTransformer,
        {
            c["code"]: {
                "equipment_id": equipment[c["equipment"]].pk,
                "phase": c["phase"],
                "set_name": c.get("set", ""),
                "secondary_a": int(c["secondary_a"]),
                "accuracy": c.get("accuracy", ""),
                "rated_burden_va": fnum(c.get("rated_burden_va")),
                "knee_v": fnum(c.get("knee_v")),
                "winding_ohm": fnum(c.get("winding_ohm")),
                "rating_factor": float(c.get("rating_factor", 1.0)),
                "excitation": (
                    [[float(a), float(v)] for a, v in c["excitation"]]
                    if c.get("excitation")
                    else None
                ),
                "nameplate": c.get("nameplate", ""),
            }
            for c in doc.get("cts", [])
        },
    )
    devices = by_code(
        models.Device,
        {
            d["code"]: {
                "kind": d["kind"],
                "functions": list(d.get("functions", [])),
                "ratio_setting": d.get("ratio_setting", ""),
            }
            for d in doc.get("devices", [])
        },
    )
    switches = by_code(
        models.Switch,
        {
            s["code"]: {"kind": s["kind"], "transition": s["transition"]}
            for s in doc.get("switches", [])
        },
    )
    procedures = by_code(
        models.Procedure,
        {
            p["code"]: {
                "title": p["title"],
                "author": p.get("author", ""),
                "devices": list(p.get("devices", [])),
            }
            for p in doc.get("procedures", [])
        },
    )

    # Terminals: every point the document references, CT terminals with their positions.
    old_tap: dict[int, tuple[str | None, str | None]] = {}
    existing_terminals = list(models.Terminal.objects.filter(site_id=sid))
    for t in existing_terminals:
        if t.ct_id and t.tap_role:
            first, second = old_tap.get(t.ct_id, (None, None))
            old_tap[t.ct_id] = (t.name, second) if t.tap_role == "first" else (first, t.name)
    wanted_terminals: dict[tuple[str, str], dict[str, Any]] = {}
    for c in doc.get("cts", []):
        ct_id = cts[c["code"]].pk
        first, second = c["in_use"]
        for name, position in c["terminals"].items():
            role = "first" if name == first else "second" if name == second else ""
            wanted_terminals[(c["code"], name)] = {
                "site_id": sid,
                "owner": c["code"],
                "name": name,
                "ct_id": ct_id,
                "position_a": float(position),
                "tap_role": role,
            }

    def point(label: str) -> tuple[str, str]:
        owner, _, name = label.partition(":")
        key = (owner, name)
        wanted_terminals.setdefault(
            key,
            {
                "site_id": sid,
                "owner": owner,
                "name": name,
                "ct_id": None,
                "position_a": None,
                "tap_role": "",
            },
        )
        return key

    refs: dict[str, list] = {
        "inputs": [],
        "outputs": [],
        "wires": [],
        "links": [],
        "grounds": [],
        "contacts": [],
    }
    for d in doc.get("devices", []):
        for inp in d.get("inputs", []):
            refs["inputs"].append((d["code"], inp, point(inp["from"]), point(inp["to"])))
        for out in d.get("outputs", []):
            refs["outputs"].append((d["code"], out, point(out["terminal"]), point(out["target"])))
    for w in doc.get("wires", []):
        refs["wires"].append((w, point(w["from"]), point(w["to"])))
    for a, b in doc.get("links", []):
        refs["links"].append((point(a), point(b)))
    for g in doc.get("grounds", []):
        refs["grounds"].append(point(g))
    for s in doc.get("switches", []):
        for contact in s.get("contacts", []):
            a, b = contact["between"]
            refs["contacts"].append((s["code"], contact, point(a), point(b)))

    # Clear tap roles that move before setting new ones: the one-role-per-CT constraint is
    # checked row by row, so a swap in one statement could trip it.
    moving = [
        t
        for t in existing_terminals
        if t.tap_role and wanted_terminals.get((t.owner, t.name), {}).get("tap_role") != t.tap_role
    ]
    if moving:
        # The rows keep their old role in memory, so the sync below still sees the change and
        # writes it with history.
        models.Terminal.objects.filter(pk__in=[t.pk for t in moving]).update(tap_role="")
    terminals = sync(
        models.Terminal,
        existing_terminals,
        wanted_terminals,
        key=lambda t: (t.owner, t.name),
        delete=False,
    )
    tid = {k: t.pk for k, t in terminals.items()}

    # Tap changes: the document's history is merged in (history is never deleted by an
    # import); a tap in use that differs from the stored one, or from the last recorded event,
    # is a change made now.
    now = timezone.now()
    change_keys = {
        (c.ct_id, c.changed_at, tuple(c.from_tap), tuple(c.to_tap))
        for c in models.TapChange.objects.filter(ct__site_id=sid)
    }
    new_changes: list[models.TapChange] = []
    for c in doc.get("cts", []):
        ct_id = cts[c["code"]].pk
        events = c.get("tap_changes", [])
        for event in events:
            at = _parse_at(event["at"])
            k = (ct_id, at, tuple(event["from"]), tuple(event["to"]))
            if k not in change_keys:
                change_keys.add(k)
                new_changes.append(
                    models.TapChange(
                        ct_id=ct_id,
                        from_tap=list(event["from"]),
                        to_tap=list(event["to"]),
                        changed_at=at,
                        changed_by=event.get("by", ""),
                        reason=event.get("reason", ""),
                    )
                )
        in_use = tuple(c["in_use"])
        previous = old_tap.get(ct_id) or (tuple(events[-1]["to"]) if events else None)
        if previous and tuple(previous) != in_use:
            new_changes.append(
                models.TapChange(
                    ct_id=ct_id,
                    from_tap=list(previous),
                    to_tap=list(in_use),
                    changed_at=now,
                    changed_by=getattr(user, "username", "") or "site import",
                    reason="tap in use changed by site import",
                )
            )
            result.tap_changes.append(f"{c['code']}: {'-'.join(previous)} -> {'-'.join(in_use)}")
    if new_changes:
        bulk_create_with_history(new_changes, models.TapChange, default_user=user)
        result.created["tap changes"] += len(new_changes)

    dev_id = {code: d.pk for code, d in devices.items()}
    sync(
        models.DeviceInput,
        models.DeviceInput.objects.filter(device__site_id=sid),
        {
            (dev_id[code], inp["name"]): {
                "device_id": dev_id[code],
                "name": inp["name"],
                "from_terminal_id": tid[a],
                "to_terminal_id": tid[b],
                "rated_a": int(inp["rated_a"]),
                "burden_va": fnum(inp.get("burden_va")),
                # The site file's default power factor is 1.0 (resistive) where VA is given.
                "pf": fnum(inp.get("pf", 1.0)) if "burden_va" in inp else None,
                "burden_r_ohm": fnum(inp["burden_ohm"][0]) if "burden_ohm" in inp else None,
                "burden_x_ohm": fnum(inp["burden_ohm"][1]) if "burden_ohm" in inp else None,
            }
            for code, inp, a, b in refs["inputs"]
        },
        key=lambda r: (r.device_id, r.name),
    )
    sync(
        models.DeviceOutput,
        models.DeviceOutput.objects.filter(device__site_id=sid),
        {
            (dev_id[code], out["name"]): {
                "device_id": dev_id[code],
                "name": out["name"],
                "terminal_id": tid[a],
                "target_id": tid[b],
            }
            for code, out, a, b in refs["outputs"]
        },
        key=lambda r: (r.device_id, r.name),
    )
    wire_keys = _numbered((tid[a], tid[b]) for _, a, b in refs["wires"])
    existing_wires = list(models.Wire.objects.filter(site_id=sid).order_by("id"))
    existing_wire_keys = dict(
        zip(
            (w.pk for w in existing_wires),
            _numbered((w.from_terminal_id, w.to_terminal_id) for w in existing_wires),
            strict=True,
        )
    )
    sync(
        models.Wire,
        existing_wires,
        {
            k: {
                "site_id": sid,
                "from_terminal_id": tid[a],
                "to_terminal_id": tid[b],
                "size": w.get("size", ""),
                "material": w.get("material", "cu"),
                "length_m": fnum(w.get("length_m")),
                "length_ft": fnum(w.get("length_ft")),
                "r_ohm": fnum(w.get("r_ohm")),
            }
            for k, (w, a, b) in zip(wire_keys, refs["wires"], strict=True)
        },
        key=lambda w: existing_wire_keys[w.pk],
    )
    existing_links = list(models.Link.objects.filter(site_id=sid).order_by("id"))
    existing_link_keys = dict(
        zip(
            (x.pk for x in existing_links),
            _numbered((x.a_id, x.b_id) for x in existing_links),
            strict=True,
        )
    )
    link_pairs = [(tid[a], tid[b]) for a, b in refs["links"]]
    sync(
        models.Link,
        existing_links,
        {
            k: {"site_id": sid, "a_id": a, "b_id": b}
            for k, (a, b) in zip(_numbered(link_pairs), link_pairs, strict=True)
        },
        key=lambda x: existing_link_keys[x.pk],
    )
    sync(
        models.Ground,
        models.Ground.objects.filter(site_id=sid),
        {tid[g]: {"site_id": sid, "terminal_id": tid[g]} for g in refs["grounds"]},
        key=lambda g: g.terminal_id,
    )
    sw_id = {code: s.pk for code, s in switches.items()}
    existing_positions = list(models.SwitchPosition.objects.filter(switch__site_id=sid))
    wanted_positions = {
        (sw_id[s["code"]], name): {
            "switch_id": sw_id[s["code"]],
            "name": name,
            "order": i,
            "is_normal": name == s["normal"],
        }
        for s in doc.get("switches", [])
        for i, name in enumerate(s["positions"])
    }
    # Same reason as the tap roles: drop a moving "normal" flag before setting the new one.
    stale_normal = [
        p.pk
        for p in existing_positions
        if p.is_normal and not wanted_positions.get((p.switch_id, p.name), {}).get("is_normal")
    ]
    if stale_normal:
        models.SwitchPosition.objects.filter(pk__in=stale_normal).update(is_normal=False)
    sync(
        models.SwitchPosition,
        existing_positions,
        wanted_positions,
        key=lambda p: (p.switch_id, p.name),
    )
    contact_pairs = [(sw_id[code], tid[a], tid[b]) for code, _, a, b in refs["contacts"]]
    existing_contacts = list(
        models.SwitchContact.objects.filter(switch__site_id=sid).order_by("id")
    )
    existing_contact_keys = dict(
        zip(
            (x.pk for x in existing_contacts),
            _numbered((x.switch_id, x.a_id, x.b_id) for x in existing_contacts),
            strict=True,
        )
    )
    sync(
        models.SwitchContact,
        existing_contacts,
        {
            k: {"switch_id": s, "a_id": a, "b_id": b, "closed_in": list(contact["closed_in"])}
            for k, (s, a, b), (_, contact, _, _) in zip(
                _numbered(contact_pairs), contact_pairs, refs["contacts"], strict=True
            )
        },
        key=lambda x: existing_contact_keys[x.pk],
    )
    proc_id = {code: p.pk for code, p in procedures.items()}
    sync(
        models.ProcedureStep,
        models.ProcedureStep.objects.filter(procedure__site_id=sid),
        {
            (proc_id[p["code"]], i): {"procedure_id": proc_id[p["code"]], "order": i, "op": op}
            for p in doc.get("procedures", [])
            for i, op in enumerate(p["steps"], start=1)
        },
        key=lambda s: (s.procedure_id, s.order),
    )

    # Coded objects that the document no longer has, children first (foreign keys protect).
    for model, section in (
        (models.Procedure, "procedures"),
        (models.Switch, "switches"),
        (models.Device, "devices"),
        (models.CurrentTransformer, "cts"),
        (models.Equipment, "equipment"),
        (models.Bus, "buses"),
    ):
        keep = [item["code"] for item in doc.get(section, [])]
        gone_ids = list(
            model.objects.filter(site_id=sid).exclude(code__in=keep).values_list("pk", flat=True)
        )
        if gone_ids:
            model.objects.filter(pk__in=gone_ids).delete()
            result.deleted[model._meta.verbose_name_plural] += len(gone_ids)
    orphans = models.Terminal.objects.filter(site_id=sid).exclude(
        pk__in=[t.pk for k, t in terminals.items() if k in wanted_terminals]
    )
    orphan_ids = list(orphans.values_list("pk", flat=True))
    if orphan_ids:
        models.Terminal.objects.filter(pk__in=orphan_ids).delete()
        result.deleted["terminals"] += len(orphan_ids)

    if result.changed:
        site_record_change(site_id=sid)


def site_record_change(*, site_id: int) -> None:
    """Mark a site's circuits as changed, inside the caller's transaction: its revision goes
    up (every result computed from the old revision is stale from the moment this commits) and
    a recompute is requested (an outbox row, and the job scheduled on commit)."""
    from analysis.services import recompute_request

    models.Site.objects.filter(pk=site_id).update(revision=F("revision") + 1)
    recompute_request(site_id=site_id)


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
    """Change the terminals in use of a CT and record the event.

    With ``move_leads`` the wires, links and grounds landed on the old terminals in use are
    re-landed on the new ones (first on first, second on second), as a crew does when it
    re-taps a CT; without it only the record of the tap changes, and the check then reports
    the new tap open until the wiring is brought in line."""
    ct = models.CurrentTransformer.objects.select_for_update().get(pk=ct.pk)
    own = {t.name: t for t in models.Terminal.objects.filter(ct=ct)}
    first, second = to
    if first == second or first not in own or second not in own:
        from django.core.exceptions import ValidationError

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
    change = models.TapChange.objects.create(
        ct=ct,
        from_tap=previous,
        to_tap=[first, second],
        changed_at=at or timezone.now(),
        changed_by=by,
        reason=reason,
    )
    site_record_change(site_id=ct.site_id)
    return change


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
