"""Writes to the physical record. One service per write, each one transaction.

``site_import`` is the one way a whole site comes in (site file, spreadsheet, tests): it
validates the document first (every error, with its JSON pointer) and writes nothing when
anything is wrong; otherwise it upserts by natural key inside one transaction: coded objects and
keyed children are updated in place, created or deleted, so history shows what really changed.
A change of a CT's terminals in use is recorded as a ``TapChange`` event.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from collections import Counter
from collections.abc import Callable, Hashable, Iterable
from dataclasses import dataclass, field
from typing import Any

from django.core.exceptions import ValidationError
from django.db import models as djm
from django.db import transaction
from django.db.models import F
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


def _park_moving_sets(site_id: int, doc: dict) -> None:
    """Take the CTs whose set or phase changes out of their set first: one CT per phase in a set
    is a unique index, checked row by row even inside one UPDATE, so two CTs swapping phases
    would meet halfway. The sync that follows writes their new set and phase (with history)."""
    wanted = {c["code"]: (c.get("set", ""), c["phase"]) for c in doc.get("cts", [])}
    moving = [
        pk
        for pk, code, set_name, phase in models.CurrentTransformer.objects.filter(
            site_id=site_id
        ).values_list("pk", "code", "set_name", "phase")
        if set_name and code in wanted and wanted[code] != (set_name, phase)
    ]
    if moving:
        models.CurrentTransformer.objects.filter(pk__in=moving).update(set_name="")


def _park_moving_positions(existing: list[models.Terminal], wanted: dict[tuple, dict]) -> None:
    """Move the CT terminals whose winding position changes above every position first, for
    the same reason (distinct positions per CT). The rows keep their old position in memory, so
    the sync below still sees the change and writes it with history."""
    moving = [
        t
        for t in existing
        if t.ct_id is not None
        and (t.owner, t.name) in wanted
        and wanted[(t.owner, t.name)]["position_a"] != t.position_a
    ]
    if not moving:
        return
    top = max(
        [t.position_a or 0.0 for t in existing]
        + [w["position_a"] or 0.0 for w in wanted.values() if w["position_a"] is not None]
    )
    for offset, terminal in enumerate(moving, start=1):
        models.Terminal.objects.filter(pk=terminal.pk).update(position_a=top + offset)


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
    _park_moving_sets(sid, doc)
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
    _park_moving_positions(existing_terminals, wanted_terminals)
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
) -> models.TapChange:
    """Change the terminals in use of a CT and record the event."""
    _lock_site(ct.site_id)
    ct = models.CurrentTransformer.objects.get(pk=ct.pk)
    change = _ct_set_tap(ct, (to[0], to[1]), by, reason, at)
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
    ct: models.CurrentTransformer, to: tuple[str, str], by: str, reason: str, at: Any
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
