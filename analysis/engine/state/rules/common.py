"""What several finding rules share: the thresholds of the findings table, the ampere format
of the messages, the fault current a CT would drive, and the roles of the inputs."""

from __future__ import annotations

from dataclasses import replace
from typing import Any

from analysis.engine.netlist import Netlist
from analysis.engine.quantities import Roles, input_roles
from analysis.engine.state.operations import normal_state
from analysis.engine.state.solve import evaluate_states

# Thresholds of the findings table (design.md), as fractions of the largest CT current of the
# circuit.
CHANGE_FRACTION = 0.10
APPEAR_FROM = 0.01
APPEAR_TO = 0.10
# input_bypassed: the probe current left, as a fraction of the probe current at the start.
BYPASS_NOW = 0.01


def _fmt_a(x: float) -> str:
    if x < 1e-6:
        return "0 A"
    return f"{x:.3g} A" if x < 0.01 else f"{x:.2f} A"


def _ground_fault_secondary(nl: Netlist, ct: Any) -> tuple[float, str, float] | None:
    """(bus ground-fault kA, bus code, secondary A through the tap in use) for the CT's
    equipment, from the site record; None where the record does not say."""
    record = nl.record
    if record is None or ct.tap_primary_a <= 0:
        return None
    eq = next((e for e in record.equipment if e.code == ct.equipment), None)
    if eq is None or not eq.bus:
        return None
    bus = next((b for b in record.buses if b.code == eq.bus), None)
    ka = None if bus is None else bus.ground_fault_ka
    if ka is None or ka <= 0:
        return None
    return float(ka), eq.bus, float(ka) * 1000.0 * ct.secondary_a / ct.tap_primary_a


def _fault_text(nl: Netlist, ct: Any) -> tuple[str, float | None]:
    gf = _ground_fault_secondary(nl, ct)
    if gf is None:
        return "the ground-fault current through its ratio (no bus fault level recorded)", None
    ka, bus, sec = gf
    return f"{_fmt_a(sec)} secondary for {bus}'s {ka:g} kA ground fault at {ct.ratio_text}", sec


def input_roles_of(nl: Netlist) -> Roles:
    """``quantities.input_roles`` of the netlist, from its reference solve (every switch,
    lead and link normal, every piece of equipment energized); cached on the netlist."""
    hit = nl.cache.get("input_roles")
    if hit is None:
        ref = replace(normal_state(nl), energized=frozenset(nl.equipment))
        # usually the normal state itself, already solved by the procedure or plan
        ev = nl.cache.get(("normal_ref", ref.energized)) or evaluate_states(nl, [ref])[0]
        b, r = ev._b, ev._row
        hit = input_roles(nl, b.inp_cur[r], b.inp_probe[r], b.inp_ref_a[r], b.inp_circ[r])
        nl.cache["input_roles"] = hit
    return hit
