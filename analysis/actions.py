"""Answers computed now from a site document, shared by the command line and the API (one way
to compute each answer): a stored procedure's verdict, a draft procedure's verdict, and a
device's isolation plan. Each body carries the safety cautions (the engine adds them)."""

from __future__ import annotations

import copy
import json
import logging
import threading
from collections import OrderedDict
from collections.abc import Callable
from typing import Any

from django.core.cache import cache

from analysis import engine
from analysis.compute import ct_report
from analysis.engine.cautions import cautions
from inventory.sitefile.validate import validate_site_document

_SITES_KEPT = 8
_local = threading.local()
_SHARED_SECONDS = 24 * 3600
_log = logging.getLogger(__name__)


def shared_at_revision(key: str, compute: Callable[[], Any]) -> Any:
    """A value computed from a site's record at one revision, kept in Django's cache (shared
    by every process of the server when the cache is Redis, ``CACHE_URL``). The record at a
    revision never changes, so the key (which must name the revision) never goes stale. The
    cache hands back a copy on every get. A cache that fails is passed by: the answer is then
    computed, never refused."""
    try:
        hit = cache.get(key)
    except Exception:  # any backend error: compute instead
        _log.warning("cache unavailable for %s", key, exc_info=True)
        return compute()
    if hit is None:
        hit = compute()
        try:
            cache.set(key, hit, _SHARED_SECONDS)
        except Exception:
            _log.warning("cache unavailable for %s", key, exc_info=True)
    return hit


def site_document_at(version: str, load: Callable[[], dict[str, Any]]) -> Any:
    """The site document at ``version`` (``Site.record_version``: the site, its revision and
    the key drawn with it; ``load`` reads it from the database), shared."""
    return shared_at_revision(f"loopkeep:site-document:{version}", load)


def site_netlist(
    version: str, load: Callable[[], dict[str, Any]]
) -> tuple[dict[str, Any], engine.Netlist]:
    """The site document and its netlist at ``revision``, kept per thread for the last few
    sites asked: a planner checks several procedures and plans of one site in a row, and the
    netlist (with the engine's caches of the normal state) is the costly part. A new revision
    is a new key (``Site.record_version``), so an edit is never answered from the old record."""
    kept: OrderedDict[str, tuple[dict[str, Any], engine.Netlist]] | None = getattr(
        _local, "sites", None
    )
    if kept is None:
        kept = _local.sites = OrderedDict()
    key = version
    hit = kept.get(key)
    if hit is None:
        doc = load()
        hit = kept[key] = (doc, engine.build_netlist(doc))
        while len(kept) > _SITES_KEPT:
            kept.popitem(last=False)
    else:
        kept.move_to_end(key)
    return hit


_VERDICTS_KEPT = 512
_verdicts: OrderedDict[tuple[str, str], dict[str, Any]] = OrderedDict()
_verdicts_lock = threading.Lock()


def procedure_check_at(
    version: str, procedure: str, load: Callable[[], dict[str, Any]]
) -> dict[str, Any]:
    """The verdict JSON of a stored procedure of a site at ``revision``, computed now unless
    this process computed it already. The check is a function of the record alone, and the
    record at a revision never changes (any write bumps the revision), so the verdict of
    ``(site, revision, procedure)`` is kept, process-wide, for the last few hundred asked:
    an edit is a new key, never a stale answer. Another process's verdict is taken from the
    shared cache (``shared_at_revision``). The caller must not change the body."""
    key = (version, procedure)
    with _verdicts_lock:
        hit = _verdicts.get(key)
        if hit is not None:
            _verdicts.move_to_end(key)
            return hit

    def compute() -> dict[str, Any]:
        doc, netlist = site_netlist(version, load)
        return procedure_check(doc, procedure, netlist=netlist)

    verdict = shared_at_revision(f"loopkeep:verdict:{version}:{procedure}", compute)
    with _verdicts_lock:
        _verdicts[key] = verdict
        while len(_verdicts) > _VERDICTS_KEPT:
            _verdicts.popitem(last=False)
    return verdict


def clear_kept() -> None:
    """Forget what this process kept (this thread's netlists, the verdicts)."""
    _local.__dict__.clear()
    with _verdicts_lock:
        _verdicts.clear()


def procedure_check(
    doc: dict[str, Any], procedure: str, *, netlist: engine.Netlist | None = None
) -> dict[str, Any]:
    """The verdict JSON of the stored procedure ``procedure`` of ``doc`` (``netlist``: the
    site's netlist when the caller holds it already, see ``site_netlist``).

    Raises ``engine.ProcedureError`` for an unknown procedure or a step the engine cannot
    simulate (unknown switch, position, jumper, terminal, …)."""
    netlist = netlist or engine.build_netlist(doc)
    return engine.check_procedure(netlist, procedure).to_json(doc["site"]["code"])


def draft_check(
    doc: dict[str, Any],
    steps: list[dict[str, Any]],
    devices: list[str] | tuple[str, ...] = (),
    *,
    netlist: engine.Netlist | None = None,
) -> dict[str, Any]:
    """The verdict JSON of operations that are not stored (``procedure`` is null)."""
    netlist = netlist or engine.build_netlist(doc)
    return engine.check_operations(netlist, list(steps), tuple(devices)).to_json(
        doc["site"]["code"]
    )


def isolation_plan(
    doc: dict[str, Any], device: str, *, netlist: engine.Netlist | None = None
) -> dict[str, Any]:
    """The isolation plan JSON of ``device``. Raises ``KeyError`` for an unknown device."""
    netlist = netlist or engine.build_netlist(doc)
    return engine.plan_isolation(netlist, device).to_json(doc["site"]["code"])


def ct_report_now(doc: dict[str, Any], ct: str) -> dict[str, Any]:
    """The CT report JSON computed from ``doc`` now (not the stored one)."""
    return ct_report(doc, ct)


class WhatIfError(ValueError):
    """A hypothetical change that does not apply to the record: ``errors`` holds
    ``(path in the request, message)`` pairs."""

    def __init__(self, errors: list[tuple[str, str]]) -> None:
        self.errors = errors
        super().__init__("; ".join(f"{p}: {m}" for p, m in errors))


_WIRE_LENGTH_KEYS = ("length_m", "length_ft", "r_ohm", "size", "material")
_BURDEN_KEYS = ("burden_va", "pf", "burden_ohm", "rated_a")


def what_if(doc: dict[str, Any], ct: str, changes: dict[str, Any]) -> dict[str, Any]:
    """The CT report as it would be after hypothetical changes, nothing stored.

    ``changes`` may hold ``in_use`` (another tap of the CT), ``wires`` (each names a wire by
    ``from``/``to`` and gives new ``length_m``/``length_ft``/``r_ohm``/``size``/``material``)
    and ``inputs`` (each names ``device`` and ``input`` and gives a new ``burden_va`` + ``pf``
    or ``burden_ohm``). The changed site is validated like an import; the answer is the CT
    report JSON with ``what_if`` (the changes) and the safety cautions."""
    doc = copy.deepcopy(doc)
    errors: list[tuple[str, str]] = []
    cts = {c["code"]: c for c in doc.get("cts", [])}
    if ct not in cts:
        raise KeyError(f"no CT {ct!r} at site {doc['site']['code']}")
    if "in_use" in changes:
        cts[ct]["in_use"] = changes["in_use"]
    wires = doc.get("wires", [])
    for i, change in enumerate(changes.get("wires", [])):
        ends = {change.get("from"), change.get("to")}
        hits = [w for w in wires if {w["from"], w["to"]} == ends]
        if not hits:
            errors.append(
                (f"wires/{i}", f"no wire joins {change.get('from')} and {change.get('to')}")
            )
            continue
        for wire in hits:
            # A wire is a size with one length, or its resistance alone (design.md).
            if "r_ohm" in change:
                for key in _WIRE_LENGTH_KEYS:
                    wire.pop(key, None)
            elif "length_m" in change or "length_ft" in change:
                for key in ("length_m", "length_ft", "r_ohm"):
                    wire.pop(key, None)
            wire.update({k: v for k, v in change.items() if k in _WIRE_LENGTH_KEYS})
    devices = {d["code"]: d for d in doc.get("devices", [])}
    for i, change in enumerate(changes.get("inputs", [])):
        device = devices.get(change.get("device"))
        found = (
            None
            if device is None
            else next(
                (x for x in device.get("inputs", []) if x["name"] == change.get("input")), None
            )
        )
        if found is None:
            errors.append(
                (
                    f"inputs/{i}",
                    f"no input {change.get('input')!r} on device {change.get('device')!r}",
                )
            )
            continue
        for key in ("burden_va", "pf", "burden_ohm"):
            found.pop(key, None)
        found.update({k: v for k, v in change.items() if k in _BURDEN_KEYS})
    if not errors:
        errors = [(e.pointer.lstrip("/"), e.message) for e in validate_site_document(doc)]
    if errors:
        raise WhatIfError(errors)
    report = ct_report(doc, ct)
    return {**report, "what_if": json.loads(json.dumps(changes)), "cautions": cautions()}
