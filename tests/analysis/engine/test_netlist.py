"""Site dict → netlist: burdens of device inputs, wire resistances, terminals, errors."""

from __future__ import annotations

import math

import pytest

from analysis.engine import build_netlist
from tests.analysis.engine.builders import SiteBuilder


def _one_input(**spec) -> complex:
    doc = SiteBuilder().build()
    doc["devices"].append(
        {
            "code": "R",
            "kind": "relay",
            "inputs": [{"name": "IA", "from": "R:1", "to": "R:2", **spec}],
        }
    )
    return build_netlist(doc).inputs[0].z_ohm


def test_input_burden_from_va_and_pf_matches_standard_burden_b01():
    # IEEE C57.13 B-0.1: 2.5 VA at 5 A, PF 0.9 -> |Z| 0.1 Ω, R 0.09 Ω (S1 for VA/PF; R from
    # memory in reference.md's table, and R = |Z|·pf here)
    z = _one_input(burden_va=2.5, rated_a=5, pf=0.9)
    assert abs(z) == pytest.approx(0.1)
    assert z.real == pytest.approx(0.09)
    assert z.imag == pytest.approx(0.1 * math.sqrt(1 - 0.81))


def test_input_burden_from_va_matches_standard_burden_b2():
    # B-2: 50 VA at 5 A, PF 0.5 -> |Z| 2.0 Ω, R 1.0 Ω (S1; R from memory)
    z = _one_input(burden_va=50, rated_a=5, pf=0.5)
    assert abs(z) == pytest.approx(2.0)
    assert z.real == pytest.approx(1.0)


def test_input_burden_from_ohms_and_one_amp_rating():
    assert _one_input(burden_ohm=[0.3, 0.4]) == complex(0.3, 0.4)
    # 1 A input: 0.5 VA at 1 A is 0.5 Ω (|Z| = S / I², common practice, no source)
    assert _one_input(burden_va=0.5, rated_a=1, pf=1.0) == pytest.approx(0.5)


def test_wire_resistance_from_the_conductor_table_in_feet():
    # reference.md worked case 4: #10 copper, 250 ft one way at 75 °C (solid) -> 0.3025 Ω (S12);
    # the conductor table reproduces NEC within 0.5 %
    doc = SiteBuilder(design_temp_c=75).build()
    doc["wires"].append({"from": "A:1", "to": "B:1", "size": "10AWG", "length_ft": 250})
    r = build_netlist(doc).wires[0].r_ohm
    assert r == pytest.approx(0.3025, rel=0.005)


def test_wire_resistance_follows_the_site_design_temperature():
    # 10 AWG copper 0.9989 Ω/kft at 20 °C (S13): 304.8 m at a 20 °C design temperature
    doc = SiteBuilder(design_temp_c=20).build()
    doc["wires"].append({"from": "A:1", "to": "B:1", "size": "10AWG", "length_m": 304.8})
    assert build_netlist(doc).wires[0].r_ohm == pytest.approx(0.9989, rel=1e-3)


def test_explicit_resistance_overrides_the_table():
    doc = SiteBuilder().build()
    doc["wires"].append(
        {"from": "A:1", "to": "B:1", "size": "10AWG", "length_m": 10, "r_ohm": 0.25}
    )
    assert build_netlist(doc).wires[0].r_ohm == 0.25


def test_every_ct_terminal_position_is_a_node_and_the_tap_sets_the_ratio():
    b = SiteBuilder()
    b.equipment("CB", max_load_a=320)
    # 600:5 multi-ratio positions (reference.md, multi-ratio taps; S4)
    b.ct(
        "CT",
        equipment="CB",
        terminals={"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600},
        in_use=("X1", "X4"),
    )
    nl = build_netlist(b.build())
    assert {f"CT:X{k}" for k in range(1, 6)} <= set(nl.index)
    ct = nl.cts["CT"]
    assert ct.ratio_text == "400:5"
    # load current at the tap: 320 A / (400/5) = 4 A (design.md, state currents)
    assert ct.load_secondary_a == pytest.approx(4.0)
    assert nl.terminals[ct.first] == "CT:X1"


def test_unknown_load_gives_one_amp():
    b = SiteBuilder()
    b.equipment("CB")
    b.ct("CT", equipment="CB")
    assert build_netlist(b.build()).cts["CT"].load_secondary_a == 1.0


def test_errors_name_the_json_pointer():
    doc = SiteBuilder().build()
    doc["wires"].append({"from": "A:1", "to": "B:1", "size": "10AWG"})
    with pytest.raises(ValueError, match=r"/wires/0: wire needs r_ohm"):
        build_netlist(doc)
    doc = SiteBuilder().build()
    doc["links"].append(["A1", "B:1"])
    with pytest.raises(ValueError, match=r"/links/0/0: terminal 'A1' is not of the form"):
        build_netlist(doc)
    doc = SiteBuilder().switch("S", [("A:1", "A:2", ("shut",))]).build()
    with pytest.raises(ValueError, match=r"/switches/0/contacts/0/closed_in: unknown positions"):
        build_netlist(doc)
