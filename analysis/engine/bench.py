"""Engine benchmark: ``python -m analysis.engine.bench [--circuits N] [--sites S]``.

Three figures (the design's performance targets; measured, not asserted):

1. normal-state nodal solve of N synthetic secondary circuits of 10–40 nodes (wye CT sets
   through chains of relay inputs, with test switches), spread over S sites: circuits/s;
2. a 30-step procedure check on a 40-node circuit: ms per check;
3. the isolation plan of a relay on a three-phase panel with a test switch and a draw-out
   case, and of a bus differential relay with 25 switches in its region: ms per plan.

The sites are invented and built in memory.
"""

from __future__ import annotations

import argparse
import gc
import random
import time
from typing import Any

from analysis.engine.netlist import build_netlist
from analysis.engine.nodal import ct_burdens, ct_burdens_many, find_circuits
from analysis.engine.plan import plan_isolation
from analysis.engine.procedure import check_operations
from analysis.engine.site import analyze_site

PHASES = ("A", "B", "C")


def _circuit(
    doc: dict[str, Any],
    tag: str,
    rng: random.Random,
    n_devices: int,
    test_switch: bool,
    draw_out: bool = False,
    trip: bool = False,
) -> None:
    """Add one wye circuit: CT set, leads to a terminal block, optional test switch, then
    ``n_devices`` devices whose phase inputs are in series, a residual input, neutral back."""
    eq = f"CB-{tag}"
    doc["equipment"].append(
        {
            "code": eq,
            "kind": "breaker",
            "in_service": True,
            "max_load_a": rng.choice([200, 320, 600, 900]),
        }
    )
    tb = f"TB-{tag}"
    ts = f"TS-{tag}"
    doc["terminal_blocks"].append({"code": tb})
    for p in PHASES:
        ct = f"{eq}-{p}"
        doc["cts"].append(
            {
                "code": ct,
                "equipment": eq,
                "phase": p,
                "set": f"{eq}-R",
                "secondary_a": 5,
                "terminals": {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600},
                "in_use": ["X1", "X4"],
                "accuracy": "C400",
                "winding_ohm": 0.3,
            }
        )
        doc["links"].append([f"{ct}:X4", f"{eq}:STAR"])
        doc["wires"].append(
            {"from": f"{ct}:X1", "to": f"{tb}:{p}", "r_ohm": round(rng.uniform(0.1, 1.5), 4)}
        )
    doc["wires"].append(
        {"from": f"{eq}:STAR", "to": f"{tb}:N", "r_ohm": round(rng.uniform(0.1, 1.5), 4)}
    )
    doc["grounds"].append(f"{tb}:N")
    line = {p: f"{tb}:{p}" for p in PHASES}
    if test_switch:
        for p in PHASES:
            doc["switches"].append(
                {
                    "code": f"{ts}/{p}",
                    "kind": "test_switch_pole",
                    "positions": ["closed", "open"],
                    "normal": "closed",
                    "transition": "make_before_break",
                    "contacts": [
                        {"between": [line[p], f"{ts}:{p}R"], "closed_in": ["closed"]},
                        {"between": [line[p], f"{ts}:SB"], "closed_in": ["open"]},
                    ],
                }
            )
            line[p] = f"{ts}:{p}R"
        doc["links"].append([f"{ts}:SB", f"{tb}:N"])
    neutral = f"{tb}:N"
    for k in range(n_devices):
        dev = f"R-{tag}-{k}"
        if draw_out and k == 0:
            contacts = []
            for p in PHASES:
                contacts.append({"between": [line[p], f"{dev}:I{p}1"], "closed_in": ["inserted"]})
                contacts.append({"between": [line[p], f"DC-{tag}:S"], "closed_in": ["withdrawn"]})
            if trip:
                contacts.append(
                    {"between": [f"{dev}:T1", f"DC-{tag}:T1"], "closed_in": ["inserted"]}
                )
            doc["switches"].append(
                {
                    "code": f"DC-{tag}",
                    "kind": "draw_out_case",
                    "positions": ["inserted", "withdrawn"],
                    "normal": "inserted",
                    "transition": "make_before_break",
                    "contacts": contacts,
                }
            )
            doc["links"].append([f"DC-{tag}:S", neutral])
        else:
            for p in PHASES:
                doc["links"].append([line[p], f"{dev}:I{p}1"])
        inputs = [
            {
                "name": f"I{p}",
                "from": f"{dev}:I{p}1",
                "to": f"{dev}:I{p}2",
                "rated_a": 5,
                "burden_va": round(rng.uniform(0.05, 2.0), 3),
                "pf": rng.choice([1.0, 0.9]),
            }
            for p in PHASES
        ]
        outputs = []
        if trip and k == 0:
            relay_out = f"DC-{tag}:T1" if draw_out else f"{dev}:T1"
            doc["switches"].append(
                {
                    "code": f"{ts}/T1",
                    "kind": "test_switch_pole",
                    "positions": ["closed", "open"],
                    "normal": "closed",
                    "transition": "break_before_make",
                    "contacts": [{"between": [relay_out, f"{ts}:T1R"], "closed_in": ["closed"]}],
                }
            )
            doc["wires"].append({"from": f"{ts}:T1R", "to": f"{eq}:TC", "r_ohm": 1.0})
            outputs = [{"name": "TRIP", "terminal": f"{dev}:T1", "target": f"{eq}:TC"}]
        doc["devices"].append(
            {
                "code": dev,
                "kind": "relay",
                "functions": ["50", "51"],
                "inputs": inputs,
                "outputs": outputs,
            }
        )
        line = {p: f"{dev}:I{p}2" for p in PHASES}
    star = f"R-{tag}:STAR"
    for p in PHASES:
        doc["links"].append([line[p], star])
    doc["devices"].append(
        {
            "code": f"R-{tag}-N",
            "kind": "relay",
            "functions": ["51N"],
            "inputs": [
                {
                    "name": "IN",
                    "from": star,
                    "to": neutral,
                    "rated_a": 5,
                    "burden_ohm": [0.05, 0.01],
                }
            ],
        }
    )


def synthetic_site(code: str, n_circuits: int, seed: int = 1) -> dict[str, Any]:
    """An invented site with ``n_circuits`` wye circuits of 10–40 nodes."""
    rng = random.Random(seed)
    doc: dict[str, Any] = {
        "format": "loopkeep.site/1",
        "site": {"code": code, "name": f"Synthetic {code}", "design_temp_c": 75},
        "equipment": [],
        "cts": [],
        "devices": [],
        "wires": [],
        "links": [],
        "grounds": [],
        "switches": [],
        "procedures": [],
        "terminal_blocks": [],
    }
    for k in range(n_circuits):
        _circuit(doc, f"{k}", rng, rng.randint(1, 8), rng.random() < 0.5)
    return doc


def panel_site(n_devices: int = 1) -> dict[str, Any]:
    """A three-phase relay panel with a test switch, a draw-out case and a trip pole."""
    doc = synthetic_site("PNL", 0)
    _circuit(doc, "1", random.Random(7), n_devices, True, draw_out=True, trip=True)
    return doc


def bus_differential_site(n_breakers: int = 4) -> dict[str, Any]:
    """A bus differential zone of ``n_breakers`` wye CT sets paralleled phase by phase onto a
    summing bus, each set through its own shorting block (a shorting screw ``/SS`` and four
    slide links ``/SL1..4``), then through test switch ``TS-87`` (CT poles ``/1..3`` with
    shorting jaws, neutral pole ``/N``, trip pole ``/T1``) into relay ``R-87`` tripping the
    lockout ``86``: 5 switches per breaker plus 5, 25 switches for four breakers. Breaker 0
    is the incoming one: its tap is written the other way round and it carries the load of
    the others, so the summing bus balances."""
    doc: dict[str, Any] = {
        "format": "loopkeep.site/1",
        "site": {"code": "BDF", "name": "Bus differential bench", "design_temp_c": 75},
        "buses": [],
        "equipment": [],
        "cts": [],
        "devices": [],
        "wires": [],
        "links": [],
        "grounds": ["TB-87:N"],
        "switches": [],
        "procedures": [],
        "terminal_blocks": [{"code": "TB-87"}],
    }
    loads = [300.0 * (n_breakers - 1)] + [300.0] * (n_breakers - 1)
    for k in range(n_breakers):
        eq, tb = f"CB-{k}", f"TB-{k}D"
        doc["equipment"].append(
            {"code": eq, "kind": "breaker", "in_service": True, "max_load_a": loads[k]}
        )
        doc["terminal_blocks"].append({"code": tb})
        for n, p in enumerate(PHASES, start=1):
            doc["cts"].append(
                {
                    "code": f"{eq}-D{p}",
                    "equipment": eq,
                    "phase": p,
                    "set": f"{eq}-D",
                    "secondary_a": 5,
                    "terminals": {"X1": 0, "X2": 2000},
                    "in_use": ["X2", "X1"] if k == 0 else ["X1", "X2"],
                    "accuracy": "C800",
                    "winding_ohm": 0.8,
                }
            )
            doc["links"].append([f"{eq}-D{p}:X2", f"{eq}:N"])
            doc["wires"].append({"from": f"{eq}-D{p}:X1", "to": f"{tb}:{n}", "r_ohm": 0.4})
        doc["wires"].append({"from": f"{eq}:N", "to": f"{tb}:4", "r_ohm": 0.4})
        doc["switches"].append(
            {
                "code": f"{tb}/SS",
                "kind": "shorting_screw",
                "positions": ["open", "shorted"],
                "normal": "open",
                "transition": "make_before_break",
                "contacts": [
                    {"between": [f"{tb}:{n}", f"{tb}:4"], "closed_in": ["shorted"]}
                    for n in (1, 2, 3)
                ],
            }
        )
        for n in (1, 2, 3, 4):
            doc["switches"].append(
                {
                    "code": f"{tb}/SL{n}",
                    "kind": "slide_link",
                    "positions": ["closed", "open"],
                    "normal": "closed",
                    "transition": "break_before_make",
                    "contacts": [{"between": [f"{tb}:{n}", f"{tb}:{n}S"], "closed_in": ["closed"]}],
                }
            )
            bus = f"TB-87:{PHASES[n - 1] if n < 4 else 'N'}"
            doc["wires"].append({"from": f"{tb}:{n}S", "to": bus, "r_ohm": 0.2})
    for n, p in enumerate(PHASES, start=1):
        doc["switches"].append(
            {
                "code": f"TS-87/{n}",
                "kind": "test_switch_pole",
                "positions": ["closed", "open"],
                "normal": "closed",
                "transition": "make_before_break",
                "contacts": [
                    {"between": [f"TB-87:{p}", f"TS-87:{n}R"], "closed_in": ["closed"]},
                    {"between": [f"TB-87:{p}", "TS-87:SB"], "closed_in": ["open"]},
                ],
            }
        )
        doc["links"].append([f"TS-87:{n}R", f"R-87:I{p}1"])
        doc["links"].append([f"R-87:I{p}2", "R-87:N"])
    doc["links"].append(["TS-87:SB", "TB-87:N"])
    for code, a, b in (("TS-87/N", "R-87:N", "TB-87:N"), ("TS-87/T1", "R-87:T1", "TS-87:T1R")):
        doc["switches"].append(
            {
                "code": code,
                "kind": "test_switch_pole",
                "positions": ["closed", "open"],
                "normal": "closed",
                "transition": "break_before_make",
                "contacts": [{"between": [a, b], "closed_in": ["closed"]}],
            }
        )
    doc["wires"].append({"from": "TS-87:T1R", "to": "86:COIL1", "r_ohm": 1.0})
    doc["devices"].append(
        {
            "code": "R-87",
            "kind": "relay",
            "functions": ["87B"],
            "inputs": [
                {
                    "name": f"I{p}",
                    "from": f"R-87:I{p}1",
                    "to": f"R-87:I{p}2",
                    "rated_a": 5,
                    "burden_va": 0.5,
                    "pf": 1.0,
                }
                for p in PHASES
            ],
            "outputs": [{"name": "TRIP", "terminal": "R-87:T1", "target": "86:COIL1"}],
        }
    )
    return doc


def procedure_30() -> list[dict[str, Any]]:
    """30 operations over the panel: trip, CT poles, draw-out case, jumpers, lifts, notes."""
    poles = [f"TS-1/{p}" for p in PHASES]
    ops: list[dict[str, Any]] = [
        {"note": "verify drawing revision"},
        {"note": "confirm the breaker is in service"},
        {"set": "TS-1/T1", "to": "open"},
    ]
    ops += [{"set": s, "to": "open"} for s in poles]
    ops += [
        {"set": "DC-1", "to": "withdrawn"},
        {"remove_device": "R-1-0"},
        {"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J1"},
        {"add_jumper": ["TB-1:B", "TB-1:N"], "id": "J2"},
        {"add_jumper": ["TB-1:C", "TB-1:N"], "id": "J3"},
        {"lift": ["R-1-1:IA2", "R-1-2:IA1"]},
        {"land": ["R-1-1:IA2", "R-1-2:IA1"]},
        {"note": "bench test"},
        {"remove_jumper": "J1"},
        {"remove_jumper": "J2"},
        {"remove_jumper": "J3"},
        {"insert_device": "R-1-0"},
        {"set": "DC-1", "to": "inserted"},
    ]
    ops += [{"set": s, "to": "closed"} for s in poles]
    ops += [
        {"deenergize": "CB-1"},
        {"set": "TS-1/A", "to": "open"},
        {"set": "TS-1/A", "to": "closed"},
        {"energize": "CB-1"},
        {"note": "check currents"},
        {"set": "TS-1/T1", "to": "closed"},
        {"note": "done"},
        {"note": "sign off"},
    ]
    return ops[:30]


def main(argv: list[str] | None = None) -> int:
    """Run the three benchmarks and print the figures."""
    ap = argparse.ArgumentParser(prog="python -m analysis.engine.bench")
    ap.add_argument("--circuits", type=int, default=30_000)
    ap.add_argument("--sites", type=int, default=500)
    ap.add_argument("--repeat", type=int, default=50)
    args = ap.parse_args(argv)

    per_site = max(1, args.circuits // args.sites)
    docs = [synthetic_site(f"S{k}", per_site, seed=k) for k in range(args.sites)]
    t0 = time.perf_counter()
    nets = [build_netlist(d) for d in docs]
    for nl in nets:
        _ = nl.arrays, nl.input_keys
    t1 = time.perf_counter()
    # The netlists stay in memory for the run; keep the collector from rescanning them.
    gc.collect()
    gc.freeze()
    n_circ = n_ct = 0
    for nl in nets:
        n_ct += len(ct_burdens(nl))
        n_circ += len(find_circuits(nl))
    t2 = time.perf_counter()
    for nl in nets:
        nl.cache.clear()
    t3 = time.perf_counter()
    ct_burdens_many(nets)
    t4 = time.perf_counter()
    sizes = [c.n_nodes for nl in nets for c in find_circuits(nl)]
    print(
        f"netlists: {len(nets)} sites, {n_circ} circuits ({n_ct} CTs, {min(sizes)}-"
        f"{max(sizes)} nodes) built in {t1 - t0:.2f} s"
    )
    print(f"solve, site by site: {t2 - t1:.3f} s = {n_circ / (t2 - t1):,.0f} circuits/s")
    print(
        f"solve, all sites in one batch: {t4 - t3:.3f} s = {n_circ / (t4 - t3):,.0f} "
        "circuits/s (target >= 20,000)"
    )

    panel = build_netlist(panel_site(n_devices=8))
    nodes = find_circuits(panel)[0].n_nodes
    ops = procedure_30()
    check_operations(panel, ops, ["R-1-0"])
    t3 = time.perf_counter()
    for _ in range(args.repeat):
        verdict = check_operations(panel, ops, ["R-1-0"])
    t4 = time.perf_counter()
    cold = []
    for _ in range(5):
        fresh = build_netlist(panel_site(n_devices=8))
        ta = time.perf_counter()
        check_operations(fresh, ops, ["R-1-0"])
        cold.append(time.perf_counter() - ta)
    print(
        f"procedure: {len(ops)} steps on a {nodes}-node circuit: "
        f"{(t4 - t3) / args.repeat * 1000:.2f} ms per check warm, "
        f"{min(cold) * 1000:.2f} ms cold (target <= 5 ms); safe={verdict.safe}"
    )

    times = []
    plan = None
    for _ in range(5):
        fresh = build_netlist(panel_site(n_devices=1))
        ta = time.perf_counter()
        plan = plan_isolation(fresh, "R-1-0")
        times.append(time.perf_counter() - ta)
    assert plan is not None
    print(
        f"plan: isolate R-1-0 (test switch + draw-out case): {min(times) * 1000:.1f} ms "
        f"(target <= 200 ms); possible={plan.possible}, {len(plan.isolate)} + "
        f"{len(plan.restore)} steps"
    )

    times = []
    for _ in range(5):
        fresh = build_netlist(bus_differential_site())
        ta = time.perf_counter()
        plan = plan_isolation(fresh, "R-87")
        times.append(time.perf_counter() - ta)
    print(
        f"plan: isolate bus differential R-87 ({len(fresh.switches)} switches in its region): "
        f"{min(times) * 1000:.1f} ms (target <= 200 ms); possible={plan.possible}, "
        f"{len(plan.isolate)} + {len(plan.restore)} steps"
    )

    sites = []
    for k in range(20):
        doc = synthetic_site(f"A{k}", per_site, seed=k)
        doc["procedures"] = [
            {
                "code": f"P{m}",
                "devices": [f"R-{m}-0"],
                "steps": [{"set": f"TS-{m}/{p}", "to": "open"} for p in PHASES],
            }
            for m in range(per_site)
            if any(s["code"] == f"TS-{m}/A" for s in doc["switches"])
        ][:3]
        sites.append(build_netlist(doc))
    ta = time.perf_counter()
    for nl in sites:
        analyze_site(nl)
    tb = time.perf_counter()
    print(
        f"analyze_site: {(tb - ta) / len(sites) * 1000:.1f} ms per site of {per_site} "
        "circuits with up to 3 stored procedures"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
