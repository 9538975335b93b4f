"""Seeded random secondary circuits for the oracle and property tests."""

from __future__ import annotations

import random
from typing import Any

from tests.analysis.engine.builders import PHASES, SiteBuilder, delta_panel, wye_panel


def _z(rng: random.Random) -> complex:
    """A device-input impedance R + jX (ohms), inductive or resistive."""
    r = rng.uniform(0.02, 2.0)
    x = rng.choice([0.0, rng.uniform(0.01, 3.0)])
    return complex(r, x)


def random_wye(rng: random.Random, n: int) -> dict[str, Any]:
    residual = _z(rng) if rng.random() < 0.5 else None
    return wye_panel(
        r_lead_ohm=rng.uniform(0.05, 3.0),
        z_relay_ohm=_z(rng),
        r_neutral_ohm=rng.uniform(0.05, 3.0),
        z_residual_ohm=residual,
        test_switch=rng.random() < 0.5,
        code=f"W{n}",
    ).build()


def random_delta(rng: random.Random, n: int) -> dict[str, Any]:
    return delta_panel(r_lead_ohm=rng.uniform(0.05, 3.0), z_relay_ohm=_z(rng), code=f"D{n}").build()


def random_parallel(rng: random.Random, n: int) -> dict[str, Any]:
    """Two or three CTs paralleled at a terminal block (a summation circuit) into a relay."""
    b = SiteBuilder(f"P{n}")
    b.equipment("EQ-1", max_load_a=300)
    b.block("TB-P")
    k = rng.randint(2, 3)
    for m in range(k):
        code = f"CT-{m}"
        b.ct(code, equipment="EQ-1", phase=PHASES[m])
        b.wire(f"{code}:X1", "TB-P:P", rng.uniform(0.05, 2.0))
        b.wire(f"{code}:X2", "TB-P:Q", rng.uniform(0.05, 2.0))
    b.device("R-P", inputs=[("I", "R-P:1", "R-P:2", _z(rng))])
    b.wire("TB-P:P", "R-P:1", rng.uniform(0.01, 1.0))
    b.wire("TB-P:Q", "R-P:2", rng.uniform(0.01, 1.0))
    b.ground("TB-P:Q")
    return b.build()


def random_mesh(rng: random.Random, n: int) -> dict[str, Any]:
    """A random connected mesh of wires, R + jX inputs and links, with 1–4 CTs (the first
    three a phase set when there are three or more) and 0–2 ground points."""
    b = SiteBuilder(f"M{n}")
    b.equipment("EQ-M", max_load_a=400)
    b.block("TB-M")
    size = rng.randint(6, 30)
    nodes = [f"TB-M:{i}" for i in range(size)]
    edges = [(i, rng.randrange(i)) for i in range(1, size)]
    edges += [tuple(rng.sample(range(size), 2)) for _ in range(rng.randint(0, size))]
    inputs = []
    for i, j in edges:
        u = rng.random()
        if u < 0.45:
            b.wire(nodes[i], nodes[j], rng.uniform(0.01, 2.0))
        elif u < 0.93:
            inputs.append((f"I{len(inputs) + 1}", nodes[i], nodes[j], _z(rng)))
        else:
            b.link(nodes[i], nodes[j])
    b.device("R-M", inputs=inputs)
    k = rng.randint(1, 4)
    for m in range(k):
        code = f"CT-{m}"
        in_set = k >= 3 and m < 3
        b.ct(code, equipment="EQ-M", phase=PHASES[m % 3], set_name="S1" if in_set else None)
        i, j = rng.sample(range(size), 2)
        b.wire(f"{code}:X1", nodes[i], rng.uniform(0.01, 1.0))
        b.wire(f"{code}:X2", nodes[j], rng.uniform(0.01, 1.0))
    for g in rng.sample(range(size), rng.choice([0, 1, 1, 2])):
        b.ground(nodes[g])
    return b.build()


def oracle_circuits(seed: int = 20261201, count: int = 240) -> list[dict[str, Any]]:
    """A fixed mix: a sixth wye, a sixth delta, a sixth paralleled, half random meshes."""
    rng = random.Random(seed)
    makers = [random_wye, random_delta, random_parallel, random_mesh, random_mesh, random_mesh]
    return [makers[n % len(makers)](rng, n) for n in range(count)]
