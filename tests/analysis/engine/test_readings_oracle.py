"""Readings of shorting paths against ngspice, an independent circuit solver (reference.md,
"Independent oracles").

The engine merges zero-impedance elements before its nodal solve and recovers their currents
afterwards from Kirchhoff's current law inside each merged node (``readings``). ngspice gets
the same circuit with every zero-impedance element (link, closed contact, jumper, ground bond)
as a 1 µΩ resistor and the live CTs as AC current sources at their load phasors; the current
of an element is its voltage over 1 µΩ. Where the elements form a tree the two must agree
whatever the (equal) small resistances; where they form a loop, ngspice's equal 1 µΩ elements
split the current as the engine's equal-conductance estimate does. Circuits: wye panels with a
test switch (one ground point), random leads, burdens, loads and taps, random poles opened
and random temporary jumpers at the terminal block.
"""

from __future__ import annotations

import math
import random
import subprocess
import tempfile
from pathlib import Path
from typing import Any

import pytest

from analysis.engine import build_netlist
from analysis.engine.procedure import simulate
from analysis.engine.readings import shorting_currents
from analysis.engine.state import evaluate_states
from tests.analysis.engine.builders import wye_panel
from tests.analysis.engine.spice import _parse, require_ngspice

pytestmark = pytest.mark.oracle

SHORT_OHM = 1e-6
LEAK_OHM = 1e9
ANGLE_DEG = {"A": 0.0, "B": -120.0, "C": 120.0}


def _case(rng: random.Random, n: int) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """A wye panel with a test switch and a residual input, and the operations of one state."""
    b = wye_panel(
        test_switch=True,
        r_lead_ohm=rng.uniform(0.1, 2.0),
        z_relay_ohm=complex(rng.uniform(0.05, 1.0), rng.uniform(0.0, 0.5)),
        r_neutral_ohm=rng.uniform(0.1, 2.0),
        z_residual_ohm=complex(rng.uniform(0.05, 1.0), 0.0),
        max_load_a=rng.uniform(50, 1200),
        code=f"RO{n}",
    )
    for c in b.doc["cts"]:
        c["terminals"] = {"X1": 0, "X2": rng.choice([200, 300, 400, 600])}
    ops: list[dict[str, Any]] = []
    for k, p in enumerate("ABC"):
        if rng.random() < 0.5:
            ops.append({"add_jumper": [f"TB-1:{p}", "TB-1:N"], "id": f"J{k}"})
    for p in "ABC":
        if rng.random() < 0.6:
            ops.append({"set": f"TS-1/{p}", "to": "open"})
    if not ops:
        ops.append({"set": "TS-1/A", "to": "open"})
    return b.build(), ops


def _spice_lines(doc: dict[str, Any], nl: Any, st: Any) -> tuple[list[str], dict[str, str]]:
    nodes: dict[str, str] = {}

    def node(t: str) -> str:
        if t not in nodes:
            nodes[t] = f"n{len(nodes)}"
        return nodes[t]

    lines: list[str] = []
    k = 0

    def el(kind: str, a: str, b: str, value: str) -> None:
        nonlocal k
        k += 1
        lines.append(f"{kind}e{k} {node(a)} {node(b)} {value}")

    for w in doc["wires"]:
        el("R", w["from"], w["to"], f"{w['r_ohm']:.12g}")
    for a, b in doc["links"]:
        el("R", a, b, f"{SHORT_OHM}")
    pos = dict(st.positions)
    for s in doc["switches"]:
        for c in s["contacts"]:
            if pos[s["code"]] in c["closed_in"]:
                el("R", c["between"][0], c["between"][1], f"{SHORT_OHM}")
    for _jid, ja, jb in st.jumpers:
        el("R", nl.terminals[ja], nl.terminals[jb], f"{SHORT_OHM}")
    for d in doc["devices"]:
        for i in d["inputs"]:
            r, x = i["burden_ohm"]
            mid = f"{d['code']}/{i['name']}#mid"
            el("R", i["from"], mid, f"{r:.12g}")
            if x:
                el("L", mid, i["to"], f"{x / (2 * math.pi * 60.0):.12g}")
            else:
                el("R", mid, i["to"], f"{SHORT_OHM}")
    for g in doc["grounds"]:
        lines.append(f"Rg{len(lines)} {node(g)} 0 {SHORT_OHM}")
    for c in nl.ct_list:
        x1, x2 = (f"{c.code}:{t}" for t in c.in_use)
        rad = math.radians(ANGLE_DEG[c.phase])
        # SPICE: I n+ n- pushes its current out of n-, so n- = X1 (current leaves X1)
        el("I", x2, x1, f"AC {c.load_secondary_a:.12g} {math.degrees(rad):.12g}")
    for n in list(nodes.values()):
        lines.append(f"Rl{n} {n} 0 {LEAK_OHM:g}")
    return lines, nodes


def _spice_currents(cases: list[tuple[list[str], list[tuple[str, str]]]]) -> list[list[float]]:
    """|V(a) − V(b)| / 1 µΩ for each element of each case, one ngspice run per case."""
    out = []
    for lines, pairs in cases:
        names = sorted({n for p in pairs for n in p})
        deck = ["* loopkeep readings oracle", *lines, ".options noopac", ".control"]
        deck.append("ac lin 1 60 60")
        deck.append("print " + " ".join(f"vr({n}) vi({n})" for n in names))
        deck += [".endc", ".end"]
        with tempfile.TemporaryDirectory() as tmp:
            path = Path(tmp) / "readings.cir"
            path.write_text("\n".join(deck) + "\n")
            run = subprocess.run(
                ["ngspice", "-b", str(path)],
                capture_output=True,
                text=True,
                timeout=60,
                check=False,
            )
        v = _parse(run.stdout)
        got = []
        for a, b in pairs:
            va = complex(v[f"vr({a})"], v[f"vi({a})"])
            vb = complex(v[f"vr({b})"], v[f"vi({b})"])
            got.append(abs(va - vb) / SHORT_OHM)
        out.append(got)
    return out


def test_shorting_path_currents_agree_with_ngspice():
    require_ngspice()
    rng = random.Random(20261202)
    engine: list[list[float]] = []
    cases = []
    for n in range(24):
        doc, ops = _case(rng, n)
        nl = build_netlist(doc)
        st = simulate(nl, ops)[-1][1]
        ev = evaluate_states(nl, [st])[0]
        paths = shorting_currents(nl, ev)
        assert paths, ops
        lines, nodes = _spice_lines(doc, nl, st)
        cases.append((lines, [(nodes[a], nodes[b]) for _, (a, b), _, _ in paths]))
        engine.append([a for _, _, a, _ in paths])
    spice = _spice_currents(cases)
    checked = 0
    for mine, ref in zip(engine, spice, strict=True):
        for a, r in zip(mine, ref, strict=True):
            # 0.1 % of the current, or 1e-4 A where it is about zero (leak and 1 µΩ effects)
            assert abs(a - r) <= max(1e-3 * abs(r), 1e-4), (a, r)
            checked += 1
    assert checked >= 40, checked
