"""A tapped CT winding with part of it shorted, against ngspice and a hand-worked balance.

The engine solves a multi-ratio winding with a section joined across as coupled sections of one
ideal core (``analysis/engine/windings.py``). The oracle here is independent of that algebra:
ngspice's AC analysis (60 Hz) of coupled inductors — a one-turn primary driven by the primary
current, and one inductor per winding section of N_k turns (L_k = N_k² · L₁), every pair coupled
with K = 1 − 10⁻⁹ — with each section's resistance in series and the external circuit as drawn
(leads, relay input R + jX, jumpers as 0 V sources that also measure their current).

Why that is the same physics (reference.md, "Independent oracles"; the coupled-inductor model of
a transformer is textbook circuit theory, from memory): with L₁ = 10 mH per turn², the
magnetizing reactance of the 120-turn winding is ω·N²·L₁ ≈ 54 kΩ against burdens of about 1 Ω
(a magnetizing error of about 2·10⁻⁵), and the leakage (1 − K)·ω·L_k is below 10 µΩ against
section resistances of 25–100 mΩ. So the oracle is an ideal core to about 10⁻⁴, and the engine
must agree with it within 0.1 %.

The circuits (600:5 multi-ratio positions X1 0, X2 100, X3 150, X4 400, X5 600; S4 of
reference.md; 320 A primary load, winding resistance 0.30 Ω for the full 120 turns, 2.5 mΩ per
turn): one CT into one relay input (leads 0.3 Ω out and back, input 0.1 Ω or 0.2 + j0.3 Ω,
ground at the relay), and the tapped wye panel of tests/analysis/engine/test_windings.py (three
cores at 0°, −120°, +120°, shared neutral, residual input), where every relay input and every
section of every CT is compared.
"""

from __future__ import annotations

import itertools
import math
import subprocess
import tempfile
from pathlib import Path
from typing import Any

import pytest

from analysis.engine import build_netlist
from analysis.engine.state import apply_op, evaluate_states, normal_state
from tests.analysis.engine.builders import SiteBuilder
from tests.analysis.engine.spice import require_ngspice

POSITIONS = {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600}
LOAD_A = 320.0
WINDING_OHM = 0.30
L_PER_TURN2_H = 0.01
COUPLING = 1 - 1e-9
TOLERANCE = 1e-3  # 0.1 %


def _site(in_use: tuple[str, str], z_relay: complex, taps_to_tb: bool = False) -> dict[str, Any]:
    b = SiteBuilder("TAP")
    b.equipment("CB", max_load_a=LOAD_A)
    b.ct("CT", equipment="CB", terminals=POSITIONS, in_use=in_use)
    b.doc["cts"][0]["winding_ohm"] = WINDING_OHM
    b.device("R", inputs=[("IA", "R:1", "R:2", z_relay)])
    b.wire(f"CT:{in_use[0]}", "R:1", 0.3)
    b.wire("R:2", f"CT:{in_use[1]}", 0.3)
    b.ground("R:2")
    if taps_to_tb:
        # the unused taps brought out to a terminal block through 50 mΩ leads each
        b.block("TB")
        for t in POSITIONS:
            if t not in in_use:
                b.wire(f"CT:{t}", f"TB:{t}", 0.05)
    return b.build()


def _engine(doc: dict[str, Any], jumpers: list[tuple[str, str]]) -> dict[str, Any]:
    nl = build_netlist(doc)
    st = normal_state(nl)
    for k, (a, b) in enumerate(jumpers):
        _, st = apply_op(nl, st, {"add_jumper": [a, b], "id": f"J{k}"}, k + 1)
    ev = evaluate_states(nl, [st])[0]
    return {
        "relay": ev.inp_cur[0],
        "inputs": dict(zip(nl.input_keys, ev.inp_cur, strict=True)),
        "sections": {(c.code, a, b): i for c in nl.ct_list for a, b, _, i in ev.sections(c.code)},
    }


def _spice(doc: dict[str, Any], jumpers: list[tuple[str, str]]) -> dict[str, Any]:
    """Solve the same circuit with coupled inductors in ngspice; currents as complex A.

    Every CT is its own core: a one-turn primary driven by its equipment's load at its phase
    angle (A 0°, B −120°, C +120°), coupled only with its own sections. Wires are resistors,
    links 1 µΩ, relay inputs R + L (X at 60 Hz) with an ammeter, jumpers 0 V sources, grounds
    1 µΩ to node 0, and every node 1 GΩ to node 0 (a path to ground for SPICE)."""
    require_ngspice()
    node: dict[str, str] = {}

    def n(t: str) -> str:
        return node.setdefault(t, f"n{len(node) + 1}")

    loads = {e["code"]: e.get("max_load_a") for e in doc["equipment"]}
    lines = ["* tapped CTs, coupled sections"]
    probes: list[tuple[str, Any]] = []
    for c_i, ct in enumerate(doc["cts"]):
        pos = ct["terminals"]
        order = sorted(pos, key=lambda t: pos[t])
        turns_full = (pos[order[-1]] - pos[order[0]]) / ct["secondary_a"]
        angle = {"A": 0.0, "B": -120.0, "C": 120.0}.get(ct.get("phase", "A"), 0.0)
        # The record's polarity: secondary current leaves the first terminal in use. With the
        # dots at the lower-position ends, a first terminal above the second means the primary
        # current enters the other way.
        primary = f"0 p{c_i}" if pos[ct["in_use"][0]] < pos[ct["in_use"][1]] else f"p{c_i} 0"
        lines.append(f"Ip{c_i} {primary} AC {loads[ct['equipment']]:g} {angle:g}")
        lines.append(f"Rp{c_i} p{c_i} 0 1e9")
        lines.append(f"Lp{c_i} p{c_i} 0 {L_PER_TURN2_H:g}")
        inductors = [f"Lp{c_i}"]
        for k, (a, b) in enumerate(itertools.pairwise(order)):
            turns = (pos[b] - pos[a]) / ct["secondary_a"]
            name = f"{c_i}_{k}"
            # dot at the lower-position end: the secondary current leaves the winding there
            lines.append(
                f"Ls{name} {n(ct['code'] + ':' + a)} m{name} {turns**2 * L_PER_TURN2_H:.12g}"
            )
            lines.append(f"Rs{name} m{name} a{name} {WINDING_OHM * turns / turns_full:.12g}")
            # ammeter: current from b into the section, i.e. leaving the winding at a
            lines.append(f"Vs{name} {n(ct['code'] + ':' + b)} a{name} 0")
            inductors.append(f"Ls{name}")
            probes.append((f"vs{name}", ("section", ct["code"], a, b)))
        for i, j in itertools.combinations(inductors, 2):
            lines.append(f"K{i}{j} {i} {j} {COUPLING:.12f}")
    for k, w in enumerate(doc["wires"]):
        lines.append(f"Rw{k} {n(w['from'])} {n(w['to'])} {w['r_ohm']:.12g}")
    for k, (a, b) in enumerate(doc["links"]):
        lines.append(f"Rl{k} {n(a)} {n(b)} 1e-6")
    for d in doc["devices"]:
        for inp in d["inputs"]:
            r, x = inp["burden_ohm"]
            tag = f"{d['code']}_{inp['name']}".replace("-", "_")
            lines.append(f"Vi{tag} {n(inp['from'])} i{tag} 0")
            lines.append(f"Ri{tag} i{tag} j{tag} {r:.12g}")
            lines.append(f"Li{tag} j{tag} {n(inp['to'])} {max(x, 1e-9) / (2 * math.pi * 60):.12g}")
            probes.append((f"vi{tag}".lower(), ("input", d["code"], inp["name"])))
    for k, (a, b) in enumerate(jumpers):
        lines.append(f"Vj{k} {n(a)} {n(b)} 0")
    for k, g in enumerate(doc["grounds"]):
        lines.append(f"Rg{k} {n(g)} 0 1e-6")
    for t in list(node.values()):
        lines.append(f"Rleak{t} {t} 0 1e9")
    lines += [".options noopac", ".control", "ac lin 1 60 60"]
    names = [p for p, _ in probes]
    for k in range(0, len(names), 10):
        part = names[k : k + 10]
        lines.append("print " + " ".join(f"real({p}#branch) imag({p}#branch)" for p in part))
    lines += [".endc", ".end"]
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "tap.cir"
        path.write_text("\n".join(lines) + "\n")
        run = subprocess.run(
            ["ngspice", "-b", str(path)], capture_output=True, text=True, timeout=60, check=False
        )
    values = _parse_currents(run.stdout)
    missing = [p for p in names if p.lower() not in values]
    if missing:
        raise AssertionError(
            f"ngspice gave no {missing[:3]}: {run.stdout[-1500:]} {run.stderr[-800:]}"
        )
    out: dict[str, Any] = {"sections": {}, "inputs": {}}
    for p, what in probes:
        if what[0] == "section":
            out["sections"][(what[1], what[2], what[3])] = values[p.lower()]
        else:
            out["inputs"][(what[1], what[2])] = values[p.lower()]
    return out


def _parse_currents(text: str) -> dict[str, complex]:
    """``real(vx#branch) = …`` / ``imag(vx#branch) = …`` lines → {"vx": complex}."""
    out: dict[str, complex] = {}
    for line in text.splitlines():
        parts = line.replace("=", " ").split()
        if len(parts) != 2 or "#branch)" not in parts[0]:
            continue
        part, name = parts[0].split("(", 1)
        name = name.split("#", 1)[0].lower()
        value = float(parts[1])
        out[name] = out.get(name, 0j) + (value if part == "real" else 1j * value)
    return out


CASES = [
    # (tap in use, relay input, jumpers, taps to a terminal block)
    (("X1", "X5"), 0.1, [("CT:X2", "CT:X3")], False),  # inside the full tap
    (("X1", "X4"), 0.1, [("CT:X4", "CT:X5")], False),  # unused section outside the tap
    (("X1", "X4"), 0.1, [("CT:X2", "CT:X3")], False),  # inside a part tap
    (("X2", "X4"), complex(0.2, 0.3), [("CT:X1", "CT:X2")], False),  # outside, below the tap
    (("X4", "X1"), complex(0.2, 0.3), [("CT:X2", "CT:X3"), ("CT:X4", "CT:X5")], False),
    (("X1", "X4"), 0.1, [("TB:X5", "R:2")], True),  # X5 back to the tap through leads
    (("X1", "X4"), complex(0.2, 0.3), [("CT:X1", "CT:X5")], False),  # whole winding shorted
    (("X1", "X4"), 0.1, [], True),  # nothing shorted: the single-source model
]


def _agree(doc: dict[str, Any], jumpers: list[tuple[str, str]], scale: float) -> None:
    ours = _engine(doc, jumpers)
    ref = _spice(doc, jumpers)
    for key, i_ref in ref["inputs"].items():
        assert abs(ours["inputs"][key] - i_ref) <= TOLERANCE * scale, (key, ours, ref)
    for key, i_ref in ref["sections"].items():
        assert abs(ours["sections"][key] - i_ref) <= TOLERANCE * scale, (key, ours, ref)


@pytest.mark.oracle
@pytest.mark.parametrize(("in_use", "z", "jumpers", "tb"), CASES)
def test_tapped_winding_currents_agree_with_coupled_inductors_in_ngspice(in_use, z, jumpers, tb):
    # the full-winding current, 320 · 5 / 600 A: the size of every current here
    _agree(_site(in_use, z, tb), jumpers, LOAD_A * 5 / 600)


@pytest.mark.oracle
@pytest.mark.parametrize(
    ("wire", "jumpers"),
    [
        (None, [("CB-1-A:X4", "CB-1-A:X5")]),  # unused section of one phase: false residual
        (None, [("CB-1-B:X2", "CB-1-B:X3")]),  # inside the tap of one phase
        (None, [("CB-1-A:X1", "CB-1-A:X5")]),  # one phase's whole winding shorted
        (("CB-1-A:X5", "CB-1-B:X5"), []),  # unused taps of two phases wired together
    ],
)
def test_tapped_wye_panel_agrees_with_coupled_inductors_in_ngspice(wire, jumpers):
    """The tapped wye panel of tests/analysis/engine/test_windings.py (three cores, phases at
    0°, −120°, +120°, shared neutral and residual input): every relay input and every section
    of every CT against ngspice."""
    from tests.analysis.engine.test_windings import tapped_panel

    b = tapped_panel()
    if wire is not None:
        b.wire(wire[0], wire[1], 0.1)
    _agree(b.build(), jumpers, 4.0)


def test_hand_worked_ampere_turn_balance_full_tap_with_x2_x3_shorted():
    """Full tap X1-X5 (600:5, N = 120 turns) in use, X2-X3 (50 A of positions = 10 turns)
    jumpered at the CT. ρ = 0.30 Ω / 120 = 2.5 mΩ per turn; external loop Z = 0.3 + 0.1 + 0.3
    = 0.7 Ω; primary 320 A (one turn).

    Unknowns: i, the current through the relay (and through the 110 turns M of X1-X2, X3-X4,
    X4-X5 in series), j, the current of the shorted section X2-X3 (N₁ = 10), e, volts per turn.
    - shorted section, jumper of 0 Ω across it: N₁·e − ρN₁·j = 0  →  j = e / ρ;
    - the loop through the relay: M·e − ρM·i = Z·i  →  e = i (Z + ρM) / M;
    - ampere-turns of the one core: M·i + N₁·j = 320.
    So i (M + N₁ (Z + ρM) / (ρM)) = 320: i = 320 / (110 + 10 · 0.975 / 0.275) = 320 / 145.4545
    = 2.200 A (instead of 320 / 120 = 2.667 A); e = 2.2 · 0.975 / 110 = 0.0195 V per turn;
    j = 0.0195 / 0.0025 = 7.800 A; check: 110 · 2.2 + 10 · 7.8 = 242 + 78 = 320 A-turns.
    """
    got = _engine(_site(("X1", "X5"), 0.1), [("CT:X2", "CT:X3")])
    assert abs(got["relay"]) == pytest.approx(2.2, rel=1e-9)
    sections = {(a, b): v for (_, a, b), v in got["sections"].items()}
    sec = {k: abs(v) for k, v in sections.items()}
    assert sec == pytest.approx(
        {("X1", "X2"): 2.2, ("X2", "X3"): 7.8, ("X3", "X4"): 2.2, ("X4", "X5"): 2.2}, rel=1e-9
    )
    turns = {("X1", "X2"): 20, ("X2", "X3"): 10, ("X3", "X4"): 50, ("X4", "X5"): 40}
    assert sum(turns[k] * v for k, v in sections.items()) == pytest.approx(320, rel=1e-9)


def test_hand_worked_unused_section_shorted_outside_the_tap():
    """Tap X1-X4 (400:5, 80 turns) in use, unused X4-X5 (40 turns) jumpered; Z = 0.7 Ω.
    The shorted section: 40·e = 40ρ·j → j = e/ρ; the tap loop: 80·e − 80ρ·i = 0.7·i →
    e = i (0.7 + 0.2) / 80; ampere-turns: 80·i + 40·j = 320 → i (80 + 40 · 0.9 / 0.2) = 320 →
    i = 320 / 260 = 1.2308 A (instead of 4.00 A), j = 1.2308 · 0.9 / 80 / 0.0025 = 5.5385 A;
    80 · 1.2308 + 40 · 5.5385 = 98.46 + 221.54 = 320 A-turns. The unused section steals the
    ampere-turns: with no winding resistance at all the relay would get nothing."""
    got = _engine(_site(("X1", "X4"), 0.1), [("CT:X4", "CT:X5")])
    assert abs(got["relay"]) == pytest.approx(320 / 260, rel=1e-9)
    assert abs(got["sections"][("CT", "X4", "X5")]) == pytest.approx(320 / 260 * 0.9 / 80 / 0.0025)
    doc = _site(("X1", "X4"), 0.1)
    doc["cts"][0]["winding_ohm"] = 0.0  # the engine's floor, 1 µΩ per turn
    assert abs(_engine(doc, [("CT:X4", "CT:X5")])["relay"]) < 0.01 * 4.0
