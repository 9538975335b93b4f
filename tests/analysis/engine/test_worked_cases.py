"""The worked burden cases 6 and 7 of reference.md, both fault cases, from the nodal solve.

Case 6 (wye; R_L = 0.5 Ω one-way lead, Z_R = 0.1 Ω relay per phase, neutral lead 0.5 Ω, 5 A):
three-phase |V_A| = 3.0 V (0.6 Ω, i.e. R_L + Z_R), phase-to-ground 5.5 V (1.1 Ω, 2 R_L + Z_R).
Case 7 (delta at the CTs, same values, no neutral): three-phase 9.0 V (1.8 Ω, 3 (R_L + Z_R)),
phase-to-ground 6.0 V (1.2 Ω, 2 (R_L + Z_R)). reference.md states them as derived and checked
with ngspice (its "Burden by connection" table; C37.110's own table from memory).
"""

from __future__ import annotations

import pytest

from analysis.engine import build_netlist, ct_burdens
from tests.analysis.engine.builders import delta_panel, wye_panel

SECONDARY_A = 5.0
TOL = 1e-9


def test_case_6_wye_three_phase_fault():
    burdens = ct_burdens(
        build_netlist(wye_panel(r_lead_ohm=0.5, z_relay_ohm=0.1, r_neutral_ohm=0.5).build())
    )
    for ct in ("CB-1-A", "CB-1-B", "CB-1-C"):
        z = burdens[ct].phase_fault
        assert z == pytest.approx(0.6, abs=TOL)  # reference.md case 6: 0.6 Ω
        assert abs(z) * SECONDARY_A == pytest.approx(3.0, abs=1e-8)  # 3.0 V at 5 A


def test_case_6_wye_phase_to_ground_fault():
    burdens = ct_burdens(
        build_netlist(wye_panel(r_lead_ohm=0.5, z_relay_ohm=0.1, r_neutral_ohm=0.5).build())
    )
    for ct in ("CB-1-A", "CB-1-B", "CB-1-C"):
        z = burdens[ct].ground_fault
        assert z == pytest.approx(1.1, abs=TOL)  # reference.md case 6: 1.1 Ω
        assert abs(z) * SECONDARY_A == pytest.approx(5.5, abs=1e-8)  # 5.5 V at 5 A


def test_case_7_delta_three_phase_fault():
    burdens = ct_burdens(build_netlist(delta_panel(r_lead_ohm=0.5, z_relay_ohm=0.1).build()))
    for ct in ("CB-2-A", "CB-2-B", "CB-2-C"):
        z = burdens[ct].phase_fault
        assert z == pytest.approx(1.8, abs=TOL)  # reference.md case 7: 1.8 Ω
        assert abs(z) * SECONDARY_A == pytest.approx(9.0, abs=1e-8)  # 9.0 V at 5 A


def test_case_7_delta_phase_to_ground_fault():
    burdens = ct_burdens(build_netlist(delta_panel(r_lead_ohm=0.5, z_relay_ohm=0.1).build()))
    for ct in ("CB-2-A", "CB-2-B", "CB-2-C"):
        z = burdens[ct].ground_fault
        assert z == pytest.approx(1.2, abs=TOL)  # reference.md case 7: 1.2 Ω
        assert abs(z) * SECONDARY_A == pytest.approx(6.0, abs=1e-8)  # 6.0 V at 5 A


def test_case_6_burden_by_element_adds_up_to_the_ground_fault_burden():
    """Leads out and back plus the relay: 0.5 + 0.5 + 0.1 (reference.md case 6 by parts)."""
    b = ct_burdens(build_netlist(wye_panel().build()))["CB-1-A"]
    shares = {e.label: e.z_ohm for e in b.elements}
    assert shares == {
        "lead CB-1-A:X1–TB-1:A": pytest.approx(0.5),
        "lead CB-1:STAR–TB-1:N": pytest.approx(0.5),
        "R-1 IA": pytest.approx(0.1),
    }
    assert {e.kind for e in b.elements} == {"lead", "device_input"}
    assert sum(e.z_ohm for e in b.elements) == pytest.approx(b.ground_fault)
