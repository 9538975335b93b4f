"""From site records to result rows: the one place where the circuit engine and the ratings
meet. Plain Python (no ORM); the jobs read records with ``inventory.selectors.site_records``
and write what this returns. A ``loopkeep.site/1`` dict is accepted wherever a record is
(converted once with ``record.record_from_document``).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import record as rec
from analysis import engine
from analysis.engine import ratings
from analysis.engine.findings import PROCEDURE_UNCHECKED, SEVERITY, Finding
from record.gcpause import gc_paused

CASES = ("ground_fault", "phase_fault")
# The values of a CT case row besides its burden (keys of the report's case, columns of CTRating).
CASE_VALUES = (
    "fault_a",
    "secondary_fault_a",
    "x_over_r",
    "vx_required_v",
    "vx_available_v",
    "c37_110_index",
    "time_to_saturate_ms",
)
_NO_VALUES: Mapping[str, Any] = {}


@dataclass
class SiteResults:
    """Everything computed for one site, as plain rows (see the result models)."""

    circuits: list[dict[str, Any]] = field(default_factory=list)
    ct_cases: list[dict[str, Any]] = field(default_factory=list)
    ct_reports: list[dict[str, Any]] = field(default_factory=list)
    findings: list[dict[str, Any]] = field(default_factory=list)
    verdicts: list[dict[str, Any]] = field(default_factory=list)


def _finding_row(
    f: Finding | dict, *, procedure: str | None = None, step: int | None = None
) -> dict[str, Any]:
    if isinstance(f, Finding):
        row = f.to_json()
        row["numbers"] = dict(f.numbers)
    else:
        row = {
            k: f.get(k) for k in ("code", "severity", "ct", "device", "input", "circuit", "message")
        }
        row["numbers"] = dict(f.get("numbers") or {})
    row["procedure"] = procedure
    row["step"] = step
    return row


def unchecked_procedure_row(code: str, error: str) -> dict[str, Any]:
    """The finding row of a stored procedure the engine could not check: ``danger``, because
    a procedure nobody could check must never pass for a safe one (a notice would sink below
    every verdict a planner looks at)."""
    return {
        "code": PROCEDURE_UNCHECKED,
        "severity": SEVERITY[PROCEDURE_UNCHECKED],
        "ct": None,
        "device": None,
        "input": None,
        "circuit": None,
        "procedure": code,
        "step": None,
        "message": f"procedure {code} could not be checked: {error}",
        "numbers": {},
    }


def devices_fed_by(feeds: dict[str, set[str]]) -> dict[str, list[str]]:
    """Invert device → CTs into CT → devices."""
    fed: dict[str, list[str]] = {}
    for device, cts in feeds.items():
        for ct in cts:
            fed.setdefault(ct, []).append(device)
    return fed


Source = rec.SiteRecord | Mapping[str, Any]


def ct_report(source: Source, ct_code: str) -> dict[str, Any]:
    """The CT report JSON of design.md for one CT of a site (burdens from the nodal solve of
    the site's circuits)."""
    record = rec.as_record(source)
    netlist = engine.build_netlist(record)
    if ct_code not in netlist.cts:
        raise KeyError(f"no CT {ct_code!r} at site {record.site.code}")
    burdens = engine.ct_burdens(netlist)
    fed = devices_fed_by(engine.input_feeds(netlist))
    b = burdens[ct_code]
    return ratings.build_ct_report(
        record,
        ct_code,
        burdens={"ground_fault": b.ground_fault, "phase_fault": b.phase_fault},
        devices_fed=fed.get(ct_code, []),
    )


def compute_site(source: Source) -> SiteResults:
    """Burdens, ratings, static and normal-state findings, circuits and procedure verdicts of
    one site (the garbage collector held off meanwhile, ``record.gcpause``: the engine
    allocates some hundred thousand small objects per site)."""
    with gc_paused():
        return _compute_site(source)


def _compute_site(source: Source) -> SiteResults:
    out = SiteResults()
    record = rec.as_record(source)
    netlist = engine.build_netlist(record)
    analysis = engine.analyze_site(netlist)
    burdens = analysis.burden_map()
    rated = ratings.site_ratings(record, burdens=burdens, feeds=analysis.feeds)
    for circuit in analysis.circuits:
        devices = sorted({d for d, _ in circuit.device_inputs})
        out.circuits.append(
            {
                "key": circuit.id,
                "cts": list(circuit.cts),
                "devices": devices,
                "ground_points": len(circuit.ground_points),
            }
        )
    ct_reports, ct_cases = out.ct_reports, out.ct_cases
    for ct_code, report in rated.reports.items():
        ct_reports.append({"ct": ct_code, "report": report})
        cases = report["cases"]
        for case in CASES:
            values = cases.get(case) or _NO_VALUES
            get = values.get
            burden = get("burden_ohm") or _NO_VALUES
            # the keys of CASE_VALUES, written out (a row per CT and case: some 400 a site)
            ct_cases.append(
                {
                    "ct": ct_code,
                    "case": case,
                    "burden_r_ohm": burden.get("r"),
                    "burden_x_ohm": burden.get("x"),
                    "burden_z_ohm": burden.get("z"),
                    "fault_a": get("fault_a"),
                    "secondary_fault_a": get("secondary_fault_a"),
                    "x_over_r": get("x_over_r"),
                    "vx_required_v": get("vx_required_v"),
                    "vx_available_v": get("vx_available_v"),
                    "c37_110_index": get("c37_110_index"),
                    "time_to_saturate_ms": get("time_to_saturate_ms"),
                }
            )
    for f in rated.findings:
        out.findings.append(_finding_row(f))
    for f in analysis.findings:
        out.findings.append(_finding_row(f))
    for code, error in analysis.procedure_errors.items():
        out.findings.append(unchecked_procedure_row(code, error))
    site_code = record.site.code
    for code, verdict in analysis.verdicts.items():
        body = verdict if isinstance(verdict, dict) else verdict.to_json(site_code)
        out.verdicts.append(
            {
                "procedure": code,
                "safe": body["safe"],
                "first_danger": body["first_danger"],
                "verdict": body,
            }
        )
        for step in body["steps"]:
            if step["step"] == 0:
                continue  # the initial state's findings are the normal-state ones above
            for f in step["findings"]:
                out.findings.append(_finding_row(f, procedure=code, step=step["step"]))
    engine.release(netlist)
    return out


def compute_sites(
    sites: Mapping[int, Source] | Iterable[tuple[int, Source]],
) -> dict[int, SiteResults]:
    """``compute_site`` for many sites (records or documents), keyed as given."""
    items = sites.items() if isinstance(sites, Mapping) else sites
    return {key: compute_site(site) for key, site in items}


def ct_plots(source: Source, ct_code: str, fmt: str = "png") -> dict[str, bytes]:
    """The CT's plots as image bytes: ``excitation`` (when it has a curve) and ``burden``."""
    from analysis import plots

    record = rec.as_record(source)
    netlist = engine.build_netlist(record)
    if ct_code not in netlist.cts:
        raise KeyError(f"no CT {ct_code!r} at site {record.site.code}")
    b = engine.ct_burdens(netlist)[ct_code]
    burdens = {"ground_fault": b.ground_fault, "phase_fault": b.phase_fault}
    report = ratings.build_ct_report(record, ct_code, burdens=burdens, devices_fed=[])
    out: dict[str, bytes] = {}
    inputs = ratings.excitation_plot_inputs(record, ct_code, burdens=burdens)
    if inputs is not None:
        out["excitation"] = plots.excitation_plot(inputs, fmt)
    out["burden"] = plots.burden_plot(
        [(_printable(e.label), e.kind, e.z_ohm) for e in b.elements],
        report["winding_ohm_at_tap"],
        fmt,
        title=_printable(f"{record.site.code} {ct_code}: burden by element (ground-fault case)"),
    )
    return out


def _printable(text: str) -> str:
    """``text`` without control characters (codes are data; a plot title shows them as is)."""
    return "".join(c if c.isprintable() else "?" for c in text)
