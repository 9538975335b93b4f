"""Engine benchmark: ``python -m analysis.bench.engine [--circuits N] [--sites S]``.

Three figures (the design's performance targets; measured, not asserted):

1. normal-state nodal solve of N synthetic secondary circuits of 10–40 nodes (wye CT sets
   through chains of relay inputs, with test switches), spread over S sites: circuits/s;
2. a 30-step procedure check on a 40-node circuit: ms per check;
3. the isolation plan of a relay on a three-phase panel with a test switch and a draw-out
   case, and of a bus differential relay with 25 switches in its region: ms per plan.

The sites are invented and built in memory with the shared document builder
(``fixtures.documents``).
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
from fixtures.documents import Contact, DocumentBuilder

PHASES = ("A", "B", "C")


def _circuit(
    b: DocumentBuilder,
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
    b.equipment(eq, max_load_a=rng.choice([200, 320, 600, 900]))
    tb = f"TB-{tag}"
    ts = f"TS-{tag}"
    b.block(tb)
    for p in PHASES:
        ct = f"{eq}-{p}"
        b.ct(
            ct,
            terminals={"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600},
            in_use=["X1", "X4"],
            equipment=eq,
            phase=p,
            set=f"{eq}-R",
            accuracy="C400",
            winding_ohm=0.3,
        )
        b.link(f"{ct}:X4", f"{eq}:STAR")
        b.wire(f"{ct}:X1", f"{tb}:{p}", r_ohm=round(rng.uniform(0.1, 1.5), 4))
    b.wire(f"{eq}:STAR", f"{tb}:N", r_ohm=round(rng.uniform(0.1, 1.5), 4))
    b.ground(f"{tb}:N")
    line = {p: f"{tb}:{p}" for p in PHASES}
    if test_switch:
        for p in PHASES:
            b.ct_pole(f"{ts}/{p}", line[p], f"{ts}:{p}R", f"{ts}:SB")
            line[p] = f"{ts}:{p}R"
        b.link(f"{ts}:SB", f"{tb}:N")
    neutral = f"{tb}:N"
    for k in range(n_devices):
        dev = f"R-{tag}-{k}"
        if draw_out and k == 0:
            contacts: list[Contact] = []
            for p in PHASES:
                contacts.append((line[p], f"{dev}:I{p}1", ("inserted",)))
                contacts.append((line[p], f"DC-{tag}:S", ("withdrawn",)))
            if trip:
                contacts.append((f"{dev}:T1", f"DC-{tag}:T1", ("inserted",)))
            b.switch(
                f"DC-{tag}",
                contacts,
                kind="draw_out_case",
                positions=("inserted", "withdrawn"),
                normal="inserted",
            )
            b.link(f"DC-{tag}:S", neutral)
        else:
            for p in PHASES:
                b.link(line[p], f"{dev}:I{p}1")
        inputs = [
            b.device_input(
                f"I{p}",
                f"{dev}:I{p}1",
                f"{dev}:I{p}2",
                burden_va=round(rng.uniform(0.05, 2.0), 3),
                pf=rng.choice([1.0, 0.9]),
            )
            for p in PHASES
        ]
        outputs = []
        if trip and k == 0:
            relay_out = f"DC-{tag}:T1" if draw_out else f"{dev}:T1"
            b.trip_pole(f"{ts}/T1", relay_out, f"{ts}:T1R")
            b.wire(f"{ts}:T1R", f"{eq}:TC", r_ohm=1.0)
            outputs = [("TRIP", f"{dev}:T1", f"{eq}:TC")]
        b.device(dev, functions=["50", "51"], inputs=inputs, outputs=outputs)
        line = {p: f"{dev}:I{p}2" for p in PHASES}
    star = f"R-{tag}:STAR"
    for p in PHASES:
        b.link(line[p], star)
    b.device(
        f"R-{tag}-N",
        functions=["51N"],
        inputs=[b.device_input("IN", star, neutral, burden_ohm=[0.05, 0.01])],
        outputs=None,
    )


def _synthetic(code: str, name: str, n_circuits: int, rng: random.Random) -> DocumentBuilder:
    b = DocumentBuilder({"code": code, "name": name, "design_temp_c": 75})
    for k in range(n_circuits):
        _circuit(b, f"{k}", rng, rng.randint(1, 8), rng.random() < 0.5)
    return b


def synthetic_site(code: str, n_circuits: int, seed: int = 1) -> dict[str, Any]:
    """An invented site with ``n_circuits`` wye circuits of 10–40 nodes."""
    return _synthetic(code, f"Synthetic {code}", n_circuits, random.Random(seed)).build()


def panel_site(n_devices: int = 1) -> dict[str, Any]:
    """A three-phase relay panel with a test switch, a draw-out case and a trip pole."""
    b = _synthetic("PNL", "Synthetic PNL", 0, random.Random(1))
    _circuit(b, "1", random.Random(7), n_devices, True, draw_out=True, trip=True)
    return b.build()


def bus_differential_site(n_breakers: int = 4) -> dict[str, Any]:
    """A bus differential zone of ``n_breakers`` wye CT sets paralleled phase by phase onto a
    summing bus, each set through its own shorting block (a shorting screw ``/SS`` and four
    slide links ``/SL1..4``), then through test switch ``TS-87`` (CT poles ``/1..3`` with
    shorting jaws, neutral pole ``/N``, trip pole ``/T1``) into relay ``R-87`` tripping the
    lockout ``86``: 5 switches per breaker plus 5, 25 switches for four breakers. Breaker 0
    is the incoming one: its tap is written the other way round and it carries the load of
    the others, so the summing bus balances."""
    b = DocumentBuilder({"code": "BDF", "name": "Bus differential bench", "design_temp_c": 75})
    b.ground("TB-87:N")
    b.block("TB-87")
    loads = [300.0 * (n_breakers - 1)] + [300.0] * (n_breakers - 1)
    for k in range(n_breakers):
        eq, tb = f"CB-{k}", f"TB-{k}D"
        b.equipment(eq, max_load_a=loads[k])
        b.block(tb)
        for n, p in enumerate(PHASES, start=1):
            b.ct(
                f"{eq}-D{p}",
                terminals={"X1": 0, "X2": 2000},
                in_use=["X2", "X1"] if k == 0 else ["X1", "X2"],
                equipment=eq,
                phase=p,
                set=f"{eq}-D",
                accuracy="C800",
                winding_ohm=0.8,
            )
            b.link(f"{eq}-D{p}:X2", f"{eq}:N")
            b.wire(f"{eq}-D{p}:X1", f"{tb}:{n}", r_ohm=0.4)
        b.wire(f"{eq}:N", f"{tb}:4", r_ohm=0.4)
        b.switch(
            f"{tb}/SS",
            [(f"{tb}:{n}", f"{tb}:4", ("shorted",)) for n in (1, 2, 3)],
            kind="shorting_screw",
            positions=("open", "shorted"),
            normal="open",
        )
        for n in (1, 2, 3, 4):
            b.switch(
                f"{tb}/SL{n}",
                [(f"{tb}:{n}", f"{tb}:{n}S", ("closed",))],
                kind="slide_link",
                transition="break_before_make",
            )
            bus = f"TB-87:{PHASES[n - 1] if n < 4 else 'N'}"
            b.wire(f"{tb}:{n}S", bus, r_ohm=0.2)
    for n, p in enumerate(PHASES, start=1):
        b.ct_pole(f"TS-87/{n}", f"TB-87:{p}", f"TS-87:{n}R", "TS-87:SB")
        b.link(f"TS-87:{n}R", f"R-87:I{p}1")
        b.link(f"R-87:I{p}2", "R-87:N")
    b.link("TS-87:SB", "TB-87:N")
    for code, x, y in (("TS-87/N", "R-87:N", "TB-87:N"), ("TS-87/T1", "R-87:T1", "TS-87:T1R")):
        b.trip_pole(code, x, y)
    b.wire("TS-87:T1R", "86:COIL1", r_ohm=1.0)
    b.device(
        "R-87",
        functions=["87B"],
        inputs=[
            b.device_input(f"I{p}", f"R-87:I{p}1", f"R-87:I{p}2", burden_va=0.5, pf=1.0)
            for p in PHASES
        ],
        outputs=[("TRIP", "R-87:T1", "86:COIL1")],
    )
    return b.build()


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
    ap = argparse.ArgumentParser(prog="python -m analysis.bench.engine")
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
        f"{min(cold) * 1000:.2f} ms cold (target <= 2 ms); safe={verdict.safe}"
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
