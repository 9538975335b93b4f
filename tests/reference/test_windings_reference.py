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

The circuit (600:5 multi-ratio positions X1 0, X2 100, X3 150, X4 400, X5 600; S4 of
reference.md): 320 A primary load, winding resistance 0.30 Ω for the full 120 turns (2.5 mΩ per
turn), leads 0.3 Ω out and back, relay input 0.1 Ω (or 0.2 + j0.3 Ω), ground at the relay.
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
        "sections": {(a, b): i for a, b, _, i in ev.sections("CT")},
    }


def _spice(doc: dict[str, Any], jumpers: list[tuple[str, str]]) -> dict[str, Any]:
    """Solve the same circuit with coupled inductors in ngspice; currents as complex A."""
    require_ngspice()
    ct = doc["cts"][0]
    order = sorted(ct["terminals"], key=lambda t: ct["terminals"][t])
    node: dict[str, str] = {}

    def n(t: str) -> str:
        if t == doc["grounds"][0]:
            return "0"
        return node.setdefault(t, f"n{len(node) + 1}")

    turns_full = (ct["terminals"][order[-1]] - ct["terminals"][order[0]]) / ct["secondary_a"]
    # The record's polarity: secondary current leaves the first terminal in use. With the dots
    # at the lower-position ends, a first terminal above the second means the primary current
    # enters the other way.
    pos = ct["terminals"]
    primary = "0 pri" if pos[ct["in_use"][0]] < pos[ct["in_use"][1]] else "pri 0"
    lines = ["* tapped CT, coupled sections", f"Ip {primary} AC {LOAD_A:g} 0", "Rpri pri 0 1e9"]
    lines.append(f"Lpri pri 0 {L_PER_TURN2_H:g}")
    inductors = ["Lpri"]
    for k, (a, b) in enumerate(itertools.pairwise(order)):
        turns = (ct["terminals"][b] - ct["terminals"][a]) / ct["secondary_a"]
        # dot at the lower-position end: the secondary current leaves the winding there
        lines.append(f"Ls{k} {n('CT:' + a)} s{k}m {turns * turns * L_PER_TURN2_H:.12g}")
        lines.append(f"Rs{k} s{k}m Vs{k}p {WINDING_OHM * turns / turns_full:.12g}")
        # ammeter: current from b into the section, i.e. leaving at a
        lines.append(f"Vs{k} {n('CT:' + b)} Vs{k}p 0")
        inductors.append(f"Ls{k}")
    m = 0
    for i in range(len(inductors)):
        for j in range(i + 1, len(inductors)):
            m += 1
            lines.append(f"K{m} {inductors[i]} {inductors[j]} {COUPLING:.12f}")
    first = f"CT:{ct['in_use'][0]}"
    for w in doc["wires"]:
        if w["from"] == first:
            # ammeter in the lead from the first terminal in use: the relay current
            lines.append(f"Vrel {n(w['from'])} lead1 0")
            lines.append(f"Rw0 lead1 {n(w['to'])} {w['r_ohm']:.12g}")
        else:
            lines.append(f"Rw{len(lines)} {n(w['from'])} {n(w['to'])} {w['r_ohm']:.12g}")
    for d in doc["devices"]:
        for inp in d["inputs"]:
            r, x = inp["burden_ohm"]
            lines.append(f"Rin {n(inp['from'])} inm {r:.12g}")
            if x:
                lines.append(f"Lin inm {n(inp['to'])} {x / (2 * math.pi * 60):.12g}")
            else:
                lines.append(f"Rinx inm {n(inp['to'])} 1e-9")
    for k, (a, b) in enumerate(jumpers):
        lines.append(f"Vj{k} {n(a)} {n(b)} 0")
    for t in list(node.values()):
        lines.append(f"Rleak{t} {t} 0 1e9")
    probes = ["vrel"] + [f"vs{k}" for k in range(len(order) - 1)]
    lines += [
        ".options noopac",
        ".control",
        "ac lin 1 60 60",
        "print " + " ".join(f"real({p}#branch) imag({p}#branch)" for p in probes),
        ".endc",
        ".end",
    ]
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "tap.cir"
        path.write_text("\n".join(lines) + "\n")
        run = subprocess.run(
            ["ngspice", "-b", str(path)], capture_output=True, text=True, timeout=60, check=False
        )
    values = _parse_currents(run.stdout)
    if "vrel" not in values:
        raise AssertionError(f"ngspice gave no result: {run.stdout[-1500:]} {run.stderr[-1500:]}")

    def cur(p: str) -> complex:
        return values[p]

    return {
        "relay": cur("vrel"),
        "sections": {(a, b): cur(f"vs{k}") for k, (a, b) in enumerate(itertools.pairwise(order))},
    }


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


@pytest.mark.oracle
@pytest.mark.parametrize(("in_use", "z", "jumpers", "tb"), CASES)
def test_tapped_winding_currents_agree_with_coupled_inductors_in_ngspice(in_use, z, jumpers, tb):
    doc = _site(in_use, z, tb)
    ours = _engine(doc, jumpers)
    ref = _spice(doc, jumpers)
    scale = LOAD_A * 5 / 600  # the full-winding current, A: the size of every current here
    assert abs(ours["relay"] - ref["relay"]) <= TOLERANCE * scale, (ours["relay"], ref["relay"])
    for sec, i_ref in ref["sections"].items():
        assert abs(ours["sections"][sec] - i_ref) <= TOLERANCE * scale, (sec, ours, ref)


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
    sec = {k: abs(v) for k, v in got["sections"].items()}
    assert sec == pytest.approx(
        {("X1", "X2"): 2.2, ("X2", "X3"): 7.8, ("X3", "X4"): 2.2, ("X4", "X5"): 2.2}, rel=1e-9
    )
    turns = {("X1", "X2"): 20, ("X2", "X3"): 10, ("X3", "X4"): 50, ("X4", "X5"): 40}
    assert sum(turns[k] * v for k, v in got["sections"].items()) == pytest.approx(320, rel=1e-9)


def test_hand_worked_unused_section_shorted_outside_the_tap():
    """Tap X1-X4 (400:5, 80 turns) in use, unused X4-X5 (40 turns) jumpered; Z = 0.7 Ω.
    The shorted section: 40·e = 40ρ·j → j = e/ρ; the tap loop: 80·e − 80ρ·i = 0.7·i →
    e = i (0.7 + 0.2) / 80; ampere-turns: 80·i + 40·j = 320 → i (80 + 40 · 0.9 / 0.2) = 320 →
    i = 320 / 260 = 1.2308 A (instead of 4.00 A), j = 1.2308 · 0.9 / 80 / 0.0025 = 5.5385 A;
    80 · 1.2308 + 40 · 5.5385 = 98.46 + 221.54 = 320 A-turns. The unused section steals the
    ampere-turns: with no winding resistance at all the relay would get nothing."""
    got = _engine(_site(("X1", "X4"), 0.1), [("CT:X4", "CT:X5")])
    assert abs(got["relay"]) == pytest.approx(320 / 260, rel=1e-9)
    assert abs(got["sections"][("X4", "X5")]) == pytest.approx(320 / 260 * 0.9 / 80 / 0.0025)
    doc = _site(("X1", "X4"), 0.1)
    doc["cts"][0]["winding_ohm"] = 0.0  # the engine's floor, 1 µΩ per turn
    assert abs(_engine(doc, [("CT:X4", "CT:X5")])["relay"]) < 0.01 * 4.0
