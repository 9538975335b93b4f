"""Write a validated site file into the database: one sync step per section.

:func:`upsert_site` runs inside the caller's transaction (``inventory.services.site_import``
validates first and owns the transaction and the recompute request). Each section of the
document becomes wanted rows under a natural key (code; device and input name; the terminals a
wire joins plus a running count, ...) and :class:`~inventory.sitefile.rowsync.RowSync` brings
the stored rows in line, so history shows what really changed. Steps run parents first (codes
before the rows that point at them); coded objects the document dropped are deleted at the end,
children first, because their foreign keys protect.

A change of a CT's terminals in use is recorded as a ``TapChange`` event.
"""

from __future__ import annotations

import datetime as dt
from collections import Counter
from dataclasses import dataclass, field
from typing import Any

from django.db import models as djm
from django.utils import timezone
from django.utils.dateparse import parse_datetime

from inventory import models
from inventory.sitefile import rowsync
from inventory.sitefile.rowsync import NewRows, Row, RowSync, numbered


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


def _parse_at(text: str) -> dt.datetime:
    value = parse_datetime(text)
    if value is None:
        raise SiteImportError([f"tap change time {text!r} is not an ISO 8601 date-time"])
    if timezone.is_naive(value):
        value = timezone.make_aware(value, dt.UTC)
    return value


def _event_key(row: Row) -> tuple:
    """What a recorded tap change says (its CT and time are the key it is found by)."""
    return (tuple(row["from_tap"]), tuple(row["to_tap"]), row["changed_by"], row["reason"])


def _note_latest(
    latest: dict[int, tuple[dt.datetime, tuple]], ct_id: int, at: dt.datetime, to: Any
) -> None:
    if ct_id not in latest or at >= latest[ct_id][0]:
        latest[ct_id] = (at, tuple(to))


def _rewrite_error(where: str, stored: tuple, given: Row) -> str:
    """A re-import that would change a recorded tap change: recorded history is kept as it
    was written (record a new change instead)."""
    labels = ("from", "to", "by", "reason")
    fields = [
        name for name, old, new in zip(labels, stored, _event_key(given), strict=True) if old != new
    ]
    first = fields[0]
    old = stored[labels.index(first)]
    shown = "[" + ", ".join(old) + "]" if isinstance(old, tuple) else repr(old)
    return (
        f"{where}/{first}: the tap change recorded at this time has {first} {shown}; recorded "
        "history cannot be changed by an import (record a new change instead)"
    )


def _num(value: Any) -> float | None:
    return None if value is None else float(value)


TerminalKey = tuple[str, str]

# Coded objects and their sections, parents first.
_CODED_SECTIONS: tuple[tuple[type[djm.Model], str], ...] = (
    (models.Bus, "buses"),
    (models.Equipment, "equipment"),
    (models.TerminalBlock, "terminal_blocks"),
    (models.CurrentTransformer, "cts"),
    (models.Device, "devices"),
    (models.Switch, "switches"),
    (models.Procedure, "procedures"),
)


# ``upsert_site(site=LOOK_UP)``: the site is read (and locked) by the upsert itself.
LOOK_UP: Any = object()


def new_row_counts(doc: dict) -> dict[type[djm.Model], int]:
    """The rows of each model the import of a valid ``doc`` writes when its site is new (the
    tap changes at most; the terminals are the points the document names), so that their ids
    can be taken ahead, for several sites in one query."""
    cts = doc.get("cts", [])
    devices = doc.get("devices", [])
    switches = doc.get("switches", [])
    points = {f"{c['code']}:{name}" for c in cts for name in c["terminals"]}
    for d in devices:
        for inp in d.get("inputs", []):
            points.add(inp["from"])
            points.add(inp["to"])
        for out in d.get("outputs", []):
            points.add(out["terminal"])
            points.add(out["target"])
    for w in doc.get("wires", []):
        points.add(w["from"])
        points.add(w["to"])
    for link in doc.get("links", []):
        points.update(link)
    points.update(doc.get("grounds", []))
    for s in switches:
        for contact in s.get("contacts", []):
            points.update(contact["between"])
    events = [len(c["tap_changes"]) for c in cts if c.get("tap_changes")]
    return {
        models.Site: 1,
        **{model: len(doc.get(section, [])) for model, section in _CODED_SECTIONS},
        models.Terminal: len(points),
        # each recorded event, and a change now where the last one left another tap
        models.TapChange: sum(events) + len(events),
        models.DeviceInput: sum(len(d.get("inputs", [])) for d in devices),
        models.DeviceOutput: sum(len(d.get("outputs", [])) for d in devices),
        models.Wire: len(doc.get("wires", [])),
        models.Link: len(doc.get("links", [])),
        models.Ground: len(set(doc.get("grounds", []))),
        models.SwitchPosition: sum(len(s["positions"]) for s in switches),
        models.SwitchContact: sum(len(s.get("contacts", [])) for s in switches),
        models.ProcedureStep: sum(len(p["steps"]) for p in doc.get("procedures", [])),
    }


def upsert_site(
    doc: dict,
    result: ImportResult,
    user: Any,
    *,
    source: str = "site import",
    new: NewRows | None = None,
    site: Any = LOOK_UP,
) -> int:
    """Upsert the site a valid document describes (in the caller's transaction); its id.
    ``source`` names the door in the tap changes an import records (``site import``).

    With ``new`` (the new rows of several sites imported in one transaction) the new rows wait
    there and the caller writes them with ``new.flush()`` before anything reads them or the
    site's change is recorded; without it they are written before this returns. ``site`` is
    the stored site when the caller has already read it with its lock (None: a new site, whose
    rows' ids the caller has reserved with :func:`new_row_counts`)."""
    upsert = _SiteUpsert(doc, result, user, source, new, site)
    site_id = upsert.run()
    if new is None:
        upsert.sync.new.flush()
    return site_id


class _SiteUpsert:
    """One import of one site: the sections in dependency order, each a method."""

    def __init__(
        self,
        doc: dict,
        result: ImportResult,
        user: Any,
        source: str,
        new: NewRows | None,
        site: Any = LOOK_UP,
    ) -> None:
        self.doc = doc
        # The stored site when the caller has read it (locked), None for a new one.
        self.known = site
        # A caller that shares ``new`` takes the ids of new sites for all of them at once.
        self.reserve = new is None
        self.source = source
        self.result = result
        self.user = user
        self.sync = RowSync(
            user=user,
            created=result.created,
            updated=result.updated,
            deleted=result.deleted,
            new=new,
        )
        self.sid = 0
        self.fresh = False  # a new site: nothing stored to compare with
        # Terminal key (owner, name) -> wanted row; filled by the CT step and by every
        # reference to a point, then written in one sync.
        self.terminals: dict[TerminalKey, Row] = {}
        self.tid: dict[TerminalKey, int] = {}

    def run(self) -> int:
        self.site()
        doc = self.doc
        if self.fresh and self.reserve:  # every row is new: take all their ids in one go
            self.sync.new.reserve(new_row_counts(doc))
        buses = self.coded(models.Bus, "buses", self.bus_row)
        self.equipment = self.coded(
            models.Equipment, "equipment", lambda e: self.equipment_row(e, buses)
        )
        self.coded(
            models.TerminalBlock,
            "terminal_blocks",
            lambda tb: {"description": tb.get("description", "")},
            delete=True,
        )
        if not self.fresh:
            self.park_moving_sets()
        self.cts = self.coded(models.CurrentTransformer, "cts", self.ct_row)
        self.devices = self.coded(models.Device, "devices", self.device_row)
        self.switches = self.coded(
            models.Switch, "switches", lambda s: {"kind": s["kind"], "transition": s["transition"]}
        )
        self.procedures = self.coded(models.Procedure, "procedures", self.procedure_row)
        old_terminals = self.stored(models.Terminal, site_id=self.sid)
        self.ct_terminals()
        refs = self.references()
        self.sync_terminals(old_terminals)
        self.tap_changes(old_terminals)
        self.device_inputs(refs["inputs"])
        self.device_outputs(refs["outputs"])
        self.wires(refs["wires"])
        self.links(refs["links"])
        self.grounds(refs["grounds"])
        self.switch_positions()
        self.switch_contacts(refs["contacts"])
        self.procedure_steps()
        self.drop_removed()
        return self.sid

    # -- site and coded objects ---------------------------------------------------------------

    def site(self) -> None:
        data = self.doc["site"]
        site = self.known
        if site is LOOK_UP:
            site = models.Site.objects.select_for_update().filter(code=data["code"]).first()
        values = {
            "name": data["name"],
            "design_temp_c": float(data.get("design_temp_c", 75)),
            "notes": data.get("notes", ""),
        }
        if site is None:
            self.fresh = True
            # Written with the rest of the new rows (revision 1, a fresh record key: the
            # model's defaults), and its history row with theirs.
            new = models.Site(code=data["code"], **values)
            row = {f.attname: getattr(new, f.attname) for f in rowsync.fields(models.Site)}
            row["updated_at"] = timezone.now()
            (self.sid,) = self.sync.new.insert(models.Site, [row])
            self.result.created["sites"] += 1
            return
        if any(getattr(site, k) != v for k, v in values.items()):
            for k, v in values.items():
                setattr(site, k, v)
            site.save()
            self.result.updated["sites"] += 1
        self.sid = site.pk

    def stored(self, model: type[djm.Model], **where: Any) -> list[Row]:
        return [] if self.fresh else rowsync.stored(model, **where)

    def coded(
        self, model: type[djm.Model], section: str, row: Any, *, delete: bool = False
    ) -> dict[str, int]:
        """Sync the coded objects of one section: code -> id. Deletion of dropped codes waits
        for :meth:`drop_removed` (children first) unless ``delete``."""
        wanted = {
            item["code"]: {"site_id": self.sid, "code": item["code"], **row(item)}
            for item in self.doc.get(section, [])
        }
        return self.sync(
            model,
            self.stored(model, site_id=self.sid),
            wanted,
            key=lambda r: r["code"],
            delete=delete,
        )

    @staticmethod
    def bus_row(b: dict) -> Row:
        return {
            k: _num(b.get(k)) for k in ("kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r")
        }

    @staticmethod
    def equipment_row(e: dict, buses: dict[str, int]) -> Row:
        return {
            "kind": e["kind"],
            "bus_id": buses[e["bus"]] if e.get("bus") else None,
            "in_service": e.get("in_service", True),
            "max_load_a": _num(e.get("max_load_a")),
        }

    def ct_row(self, c: dict) -> Row:
        return {
            "equipment_id": self.equipment[c["equipment"]],
            "phase": c["phase"],
            "set_name": c.get("set", ""),
            "secondary_a": int(c["secondary_a"]),
            "accuracy": c.get("accuracy", ""),
            "rated_burden_va": _num(c.get("rated_burden_va")),
            "knee_v": _num(c.get("knee_v")),
            "winding_ohm": _num(c.get("winding_ohm")),
            "rating_factor": float(c.get("rating_factor", 1.0)),
            "excitation": (
                [[float(a), float(v)] for a, v in c["excitation"]] if c.get("excitation") else None
            ),
            "nameplate": c.get("nameplate", ""),
        }

    @staticmethod
    def device_row(d: dict) -> Row:
        return {
            "kind": d["kind"],
            "functions": list(d.get("functions", [])),
            "ratio_setting": d.get("ratio_setting", ""),
        }

    @staticmethod
    def procedure_row(p: dict) -> Row:
        return {
            "title": p["title"],
            "author": p.get("author", ""),
            "devices": list(p.get("devices", [])),
        }

    # -- terminals ----------------------------------------------------------------------------

    def ct_terminals(self) -> None:
        """CT terminals with their positions and the two in use (tap roles)."""
        for c in self.doc.get("cts", []):
            ct_id = self.cts[c["code"]]
            first, second = c["in_use"]
            for name, position in c["terminals"].items():
                role = "first" if name == first else "second" if name == second else ""
                self.terminals[(c["code"], name)] = {
                    "site_id": self.sid,
                    "owner": c["code"],
                    "name": name,
                    "ct_id": ct_id,
                    "position_a": float(position),
                    "tap_role": role,
                }

    def point(self, label: str) -> TerminalKey:
        """A terminal the document refers to (``OWNER:NAME``), wanted if not yet."""
        owner, _, name = label.partition(":")
        key = (owner, name)
        if key not in self.terminals:
            self.terminals[key] = {
                "site_id": self.sid,
                "owner": owner,
                "name": name,
                "ct_id": None,
                "position_a": None,
                "tap_role": "",
            }
        return key

    def references(self) -> dict[str, list]:
        """Every row that joins terminals, with its terminals resolved to keys."""
        point = self.point
        refs: dict[str, list] = {
            "inputs": [],
            "outputs": [],
            "wires": [],
            "links": [],
            "grounds": [],
            "contacts": [],
        }
        for d in self.doc.get("devices", []):
            for inp in d.get("inputs", []):
                refs["inputs"].append((d["code"], inp, point(inp["from"]), point(inp["to"])))
            for out in d.get("outputs", []):
                refs["outputs"].append(
                    (d["code"], out, point(out["terminal"]), point(out["target"]))
                )
        for w in self.doc.get("wires", []):
            refs["wires"].append((w, point(w["from"]), point(w["to"])))
        for a, b in self.doc.get("links", []):
            refs["links"].append((point(a), point(b)))
        for g in self.doc.get("grounds", []):
            refs["grounds"].append(point(g))
        for s in self.doc.get("switches", []):
            for contact in s.get("contacts", []):
                a, b = contact["between"]
                refs["contacts"].append((s["code"], contact, point(a), point(b)))
        return refs

    def sync_terminals(self, old: list[Row]) -> None:
        # Clear tap roles that move before setting new ones: the one-role-per-CT constraint is
        # checked row by row, so a swap in one statement could trip it. The rows keep their
        # old role in ``old``, so the sync below still sees the change and writes it with
        # history.
        moving = [
            t["id"]
            for t in old
            if t["tap_role"]
            and self.terminals.get((t["owner"], t["name"]), {}).get("tap_role") != t["tap_role"]
        ]
        if moving:
            models.Terminal.objects.filter(pk__in=moving).update(tap_role="")
        self.park_moving_positions(old)
        self.tid = self.sync(
            models.Terminal,
            old,
            self.terminals,
            key=lambda t: (t["owner"], t["name"]),
            delete=False,
        )

    def park_moving_sets(self) -> None:
        """Take the CTs whose set or phase changes out of their set first: one CT per phase in
        a set is a unique index, checked row by row even inside one UPDATE, so two CTs swapping
        phases would meet halfway. The sync that follows writes their new set and phase (with
        history)."""
        wanted = {c["code"]: (c.get("set", ""), c["phase"]) for c in self.doc.get("cts", [])}
        moving = [
            pk
            for pk, code, set_name, phase in models.CurrentTransformer.objects.filter(
                site_id=self.sid
            ).values_list("pk", "code", "set_name", "phase")
            if set_name and code in wanted and wanted[code] != (set_name, phase)
        ]
        if moving:
            models.CurrentTransformer.objects.filter(pk__in=moving).update(set_name="")

    def park_moving_positions(self, old: list[Row]) -> None:
        """Move the CT terminals whose winding position changes above every position first,
        for the same reason (distinct positions per CT). ``old`` keeps the old positions, so
        the sync still sees the change and writes it with history."""
        wanted = self.terminals
        moving = [
            t["id"]
            for t in old
            if t.get("ct_id") is not None
            and (t["owner"], t["name"]) in wanted
            and wanted[(t["owner"], t["name"])].get("position_a") != t["position_a"]
        ]
        if not moving:
            return
        top = max(
            [t["position_a"] or 0.0 for t in old]
            + [w.get("position_a") or 0.0 for w in wanted.values()]
        )
        for offset, pk in enumerate(moving, start=1):
            models.Terminal.objects.filter(pk=pk).update(position_a=top + offset)

    def tap_changes(self, old_terminals: list[Row]) -> None:
        """The document's tap-change history is merged in (an import never deletes history);
        a tap in use that differs from the stored one, or from the last recorded event, is a
        change made now."""
        old_tap: dict[int, tuple[str | None, str | None]] = {}
        for t in old_terminals:
            if t["ct_id"] and t["tap_role"]:
                first, second = old_tap.get(t["ct_id"], (None, None))
                old_tap[t["ct_id"]] = (
                    (t["name"], second) if t["tap_role"] == "first" else (first, t["name"])
                )
        now = timezone.now()
        recorded: dict[tuple[int, dt.datetime], list[tuple]] = {}
        # The tap each CT's latest event (stored or in the file) left in use.
        latest: dict[int, tuple[dt.datetime, tuple]] = {}
        for c in self.stored(models.TapChange, ct__site_id=self.sid):
            recorded.setdefault((c["ct_id"], c["changed_at"]), []).append(_event_key(c))
            _note_latest(latest, c["ct_id"], c["changed_at"], c["to_tap"])
        new: list[Row] = []
        rewrites: list[str] = []
        added: set[tuple] = set()
        for ct_index, c in enumerate(self.doc.get("cts", [])):
            ct_id = self.cts[c["code"]]
            events = c.get("tap_changes", [])
            for number, event in enumerate(events):
                at = _parse_at(event["at"])
                row = {
                    "from_tap": list(event["from"]),
                    "to_tap": list(event["to"]),
                    "changed_by": event.get("by", ""),
                    "reason": event.get("reason", ""),
                }
                stored = recorded.get((ct_id, at), [])
                if _event_key(row) in stored or (ct_id, at, _event_key(row)) in added:
                    continue
                if stored:
                    where = f"/cts/{ct_index}/tap_changes/{number}"
                    rewrites.append(_rewrite_error(where, stored[0], row))
                    continue
                added.add((ct_id, at, _event_key(row)))
                _note_latest(latest, ct_id, at, row["to_tap"])
                new.append({"ct_id": ct_id, "changed_at": at, **row})
            in_use = tuple(c["in_use"])
            # the tap before now: where the latest recorded change left it, else the stored one
            previous = latest[ct_id][1] if ct_id in latest else old_tap.get(ct_id)
            if previous and tuple(previous) != in_use:
                new.append(
                    {
                        "ct_id": ct_id,
                        "from_tap": list(previous),
                        "to_tap": list(in_use),
                        "changed_at": now,
                        "changed_by": getattr(self.user, "username", "") or self.source,
                        "reason": f"tap in use changed by {self.source}",
                    }
                )
                self.result.tap_changes.append(
                    f"{c['code']}: {'-'.join(previous)} -> {'-'.join(in_use)}"
                )
        if rewrites:
            raise SiteImportError(rewrites)
        if new:
            self.sync.new.insert(models.TapChange, new)
            self.result.created["tap changes"] += len(new)

    # -- rows that join terminals -------------------------------------------------------------

    def device_inputs(self, refs: list) -> None:
        tid = self.tid
        wanted = {}
        for code, inp, a, b in refs:
            device_id = self.devices[code]
            wanted[(device_id, inp["name"])] = {
                "device_id": device_id,
                "name": inp["name"],
                "from_terminal_id": tid[a],
                "to_terminal_id": tid[b],
                "rated_a": int(inp["rated_a"]),
                "burden_va": _num(inp.get("burden_va")),
                # The site file's default power factor is 1.0 (resistive) where VA is given.
                "pf": _num(inp.get("pf", 1.0)) if "burden_va" in inp else None,
                "burden_r_ohm": _num(inp["burden_ohm"][0]) if "burden_ohm" in inp else None,
                "burden_x_ohm": _num(inp["burden_ohm"][1]) if "burden_ohm" in inp else None,
            }
        self.sync(
            models.DeviceInput,
            self.stored(models.DeviceInput, device__site_id=self.sid),
            wanted,
            key=lambda r: (r["device_id"], r["name"]),
        )

    def device_outputs(self, refs: list) -> None:
        wanted = {}
        for code, out, a, b in refs:
            device_id = self.devices[code]
            wanted[(device_id, out["name"])] = {
                "device_id": device_id,
                "name": out["name"],
                "terminal_id": self.tid[a],
                "target_id": self.tid[b],
            }
        self.sync(
            models.DeviceOutput,
            self.stored(models.DeviceOutput, device__site_id=self.sid),
            wanted,
            key=lambda r: (r["device_id"], r["name"]),
        )

    def keyed_by_ends(
        self, model: type[djm.Model], ends: tuple[str, ...], wanted: list[Row], **where: Any
    ) -> None:
        """Rows with no code of their own, keyed by the ids in ``ends`` plus a running count
        (document order against stored id order)."""
        if self.fresh:  # nothing stored to match: no keys needed
            self.sync.create(model, wanted)
            return
        old = self.stored(model, **where)
        old_keys = dict(
            zip(
                (r["id"] for r in old),
                numbered(tuple(r[e] for e in ends) for r in old),
                strict=True,
            )
        )
        keys = numbered(tuple(r[e] for e in ends) for r in wanted)
        self.sync(
            model,
            old,
            dict(zip(keys, wanted, strict=True)),
            key=lambda r: old_keys[r["id"]],
        )

    def wires(self, refs: list) -> None:
        tid = self.tid
        self.keyed_by_ends(
            models.Wire,
            ("from_terminal_id", "to_terminal_id"),
            [
                {
                    "site_id": self.sid,
                    "from_terminal_id": tid[a],
                    "to_terminal_id": tid[b],
                    "size": w.get("size", ""),
                    "material": w.get("material", "cu"),
                    "length_m": _num(w.get("length_m")),
                    "length_ft": _num(w.get("length_ft")),
                    "r_ohm": _num(w.get("r_ohm")),
                }
                for w, a, b in refs
            ],
            site_id=self.sid,
        )

    def links(self, refs: list) -> None:
        self.keyed_by_ends(
            models.Link,
            ("a_id", "b_id"),
            [{"site_id": self.sid, "a_id": self.tid[a], "b_id": self.tid[b]} for a, b in refs],
            site_id=self.sid,
        )

    def grounds(self, refs: list) -> None:
        self.sync(
            models.Ground,
            self.stored(models.Ground, site_id=self.sid),
            {self.tid[g]: {"site_id": self.sid, "terminal_id": self.tid[g]} for g in refs},
            key=lambda g: g["terminal_id"],
        )

    def switch_positions(self) -> None:
        old = self.stored(models.SwitchPosition, switch__site_id=self.sid)
        wanted = {
            (self.switches[s["code"]], name): {
                "switch_id": self.switches[s["code"]],
                "name": name,
                "order": i,
                "is_normal": name == s["normal"],
            }
            for s in self.doc.get("switches", [])
            for i, name in enumerate(s["positions"])
        }
        # Same reason as the tap roles: drop a moving "normal" flag before setting the new one.
        stale_normal = [
            p["id"]
            for p in old
            if p["is_normal"] and not wanted.get((p["switch_id"], p["name"]), {}).get("is_normal")
        ]
        if stale_normal:
            models.SwitchPosition.objects.filter(pk__in=stale_normal).update(is_normal=False)
        self.sync(models.SwitchPosition, old, wanted, key=lambda p: (p["switch_id"], p["name"]))

    def switch_contacts(self, refs: list) -> None:
        self.keyed_by_ends(
            models.SwitchContact,
            ("switch_id", "a_id", "b_id"),
            [
                {
                    "switch_id": self.switches[code],
                    "a_id": self.tid[a],
                    "b_id": self.tid[b],
                    "closed_in": list(contact["closed_in"]),
                }
                for code, contact, a, b in refs
            ],
            switch__site_id=self.sid,
        )

    def procedure_steps(self) -> None:
        wanted = {
            (self.procedures[p["code"]], i): {
                "procedure_id": self.procedures[p["code"]],
                "order": i,
                "op": op,
            }
            for p in self.doc.get("procedures", [])
            for i, op in enumerate(p["steps"], start=1)
        }
        self.sync(
            models.ProcedureStep,
            self.stored(models.ProcedureStep, procedure__site_id=self.sid),
            wanted,
            key=lambda s: (s["procedure_id"], s["order"]),
        )

    # -- what the document dropped ------------------------------------------------------------

    def drop_removed(self) -> None:
        """Coded objects the document no longer has, children first (foreign keys protect),
        then terminals nothing refers to any more."""
        for model in (*(m for m, _ in reversed(_CODED_SECTIONS)), models.Terminal):
            gone = self.sync.gone.get(model)
            if gone:
                # Count what this delete removed: a dropped CT's terminals went with it.
                _, removed = model.objects.filter(pk__in=gone).delete()
                if removed.get(model._meta.label):
                    name = str(model._meta.verbose_name_plural)
                    self.result.deleted[name] += removed[model._meta.label]
