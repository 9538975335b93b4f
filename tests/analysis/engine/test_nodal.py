"""Normal-state nodal analysis: open loops, floating parts, paralleled CTs, grounds, feeds.

Expected values are circuit analysis by hand (series/parallel reduction, common practice, no
source) on circuits small enough to reduce; the oracle test covers the general case.
"""

from __future__ import annotations

import pytest

from analysis.engine import build_netlist, ct_burdens, ct_burdens_many, find_circuits, input_feeds
from tests.analysis.engine.builders import SiteBuilder, delta_panel, wye_panel


def _loop(r_out: float, z: complex, r_back: float, *, code: str = "CT") -> SiteBuilder:
    b = SiteBuilder()
    b.equipment("CB", max_load_a=400)
    b.ct(code, equipment="CB")
    b.device("R", inputs=[("IA", "R:1", "R:2", z)])
    b.wire(f"{code}:X1", "R:1", r_out)
    b.wire("R:2", f"{code}:X2", r_back)
    b.ground("R:2")
    return b


def test_series_loop_burden_is_the_sum_of_the_loop():
    z = ct_burdens(build_netlist(_loop(0.2, complex(0.3, 0.4), 0.1).build()))["CT"]
    assert z.ground_fault == pytest.approx(complex(0.6, 0.4))
    assert z.phase_fault == pytest.approx(complex(0.6, 0.4))  # no set: the CT alone
    assert z.input_currents[("R", "IA")] == pytest.approx(1.0)  # 1 A leaves X1 through IA


def test_open_loop_is_none_and_does_not_break_the_rest_of_the_site():
    b = _loop(0.2, 0.3, 0.1)
    b.doc["wires"].pop()  # the return lead is missing: X2 is left floating
    b.ct("CT2", equipment="CB")
    b.device("R2", inputs=[("IA", "R2:1", "R2:2", 0.5)])
    b.wire("CT2:X1", "R2:1", 0.1)
    b.wire("R2:2", "CT2:X2", 0.1)
    nl = build_netlist(b.build())
    burdens = ct_burdens(nl)
    assert burdens["CT"].ground_fault is None and burdens["CT"].phase_fault is None
    assert burdens["CT"].elements == ()
    assert burdens["CT2"].ground_fault == pytest.approx(0.7)
    circuits = {c.id: c for c in find_circuits(nl)}
    assert circuits["CKT-CT"].open_cts == ("CT",)


def test_floating_island_without_a_ct_is_ignored():
    b = _loop(0.2, 0.3, 0.1)
    b.device("M", kind="meter", inputs=[("I", "M:1", "M:2", 0.2)])
    b.wire("M:2", "TB-9:1", 0.4)
    nl = build_netlist(b.build())
    assert ct_burdens(nl)["CT"].ground_fault == pytest.approx(0.6)
    assert [c.id for c in find_circuits(nl)] == ["CKT-CT"]


def test_ct_shorted_at_its_terminals_sees_no_burden():
    b = _loop(0.2, 0.3, 0.1)
    b.link("CT:X1", "CT:X2")
    assert ct_burdens(build_netlist(b.build()))["CT"].ground_fault == pytest.approx(0.0)


def test_paralleled_cts_each_see_their_own_leads_and_the_common_relay():
    b = SiteBuilder()
    b.equipment("CB", max_load_a=400)
    for k, (r1, r2) in enumerate([(0.2, 0.3), (0.5, 0.1)]):
        b.ct(f"CT{k}", equipment="CB")
        b.wire(f"CT{k}:X1", "TB:P", r1)
        b.wire(f"CT{k}:X2", "TB:Q", r2)
    b.device("R", inputs=[("I", "TB:P", "TB:Q", complex(0.4, 0.2))])
    b.ground("TB:Q")
    burdens = ct_burdens(build_netlist(b.build()))
    # the other CT is an ideal current source (no admittance), so 1 A goes through the relay
    assert burdens["CT0"].ground_fault == pytest.approx(complex(0.9, 0.2))
    assert burdens["CT1"].ground_fault == pytest.approx(complex(1.0, 0.2))


def test_grounds_of_one_circuit_are_one_node():
    """The return path through station ground: X1 lead to ground G1, X2 through the relay to
    ground G2. Two ground points, and the loop closes through ground."""
    b = SiteBuilder()
    b.equipment("CB", max_load_a=400)
    b.ct("CT", equipment="CB")
    b.wire("CT:X1", "TB:1", 0.2)
    b.ground("TB:1")
    b.wire("CT:X2", "R:2", 0.3)
    b.device("R", inputs=[("I", "R:1", "R:2", 0.5)])
    b.ground("R:1")
    nl = build_netlist(b.build())
    assert ct_burdens(nl)["CT"].ground_fault == pytest.approx(0.2 + 0.3 + 0.5)
    (circuit,) = find_circuits(nl)
    assert circuit.ground_points == ("TB:1", "R:1")


def test_two_separately_grounded_circuits_stay_separate():
    nl = build_netlist(_loop(0.1, 0.1, 0.1, code="CTX").build())
    doc = _loop(0.1, 0.1, 0.1, code="CTX").build()
    doc2 = _loop(0.2, 0.2, 0.2, code="CTY").build()
    doc["cts"] += doc2["cts"]
    doc["wires"] += [
        {**w, "from": w["from"].replace("R:", "S:"), "to": w["to"].replace("R:", "S:")}
        for w in doc2["wires"]
    ]
    doc["devices"].append(
        {
            "code": "S",
            "kind": "relay",
            "inputs": [{"name": "I", "from": "S:1", "to": "S:2", "burden_ohm": [0.2, 0]}],
        }
    )
    doc["grounds"].append("S:2")
    nl = build_netlist(doc)
    circuits = {c.id: c for c in find_circuits(nl)}
    assert set(circuits) == {"CKT-CTX", "CKT-CTY"}
    assert circuits["CKT-CTX"].ground_points == ("R:2",)
    assert circuits["CKT-CTY"].ground_points == ("S:2",)
    assert input_feeds(nl) == {"R": {"CTX"}, "S": {"CTY"}}


def test_feeds_of_wye_and_delta_relays():
    assert input_feeds(build_netlist(wye_panel().build())) == {
        "R-1": {"CB-1-A", "CB-1-B", "CB-1-C"}
    }
    assert input_feeds(build_netlist(delta_panel().build())) == {
        "R-2": {"CB-2-A", "CB-2-B", "CB-2-C"}
    }


def test_circuit_lists_its_inputs_and_ground_point():
    (circuit,) = find_circuits(build_netlist(wye_panel(z_residual_ohm=0.2).build()))
    assert circuit.id == "CKT-CB-1-A"
    assert circuit.cts == ("CB-1-A", "CB-1-B", "CB-1-C")
    assert set(circuit.device_inputs) == {
        ("R-1", "IA"),
        ("R-1", "IB"),
        ("R-1", "IC"),
        ("R-1", "IN"),
    }
    assert circuit.ground_points == ("TB-1:N",)


def test_residual_input_adds_to_the_ground_fault_burden_only():
    """Wye with a residual input Z_N: ground fault 2 R_L + Z_R + Z_N, three-phase R_L + Z_R
    (reference.md, burden by connection: "+ residual device")."""
    burdens = ct_burdens(build_netlist(wye_panel(z_residual_ohm=0.2).build()))
    assert burdens["CB-1-A"].ground_fault == pytest.approx(1.3)
    assert burdens["CB-1-A"].phase_fault == pytest.approx(0.6)


def test_batch_of_sites_equals_site_by_site():
    docs = [wye_panel(r_lead_ohm=0.1 * k, code=f"W{k}").build() for k in range(1, 6)]
    docs += [delta_panel(r_lead_ohm=0.2 * k, code=f"D{k}").build() for k in range(1, 4)]
    single = [ct_burdens(build_netlist(d)) for d in docs]
    batch = ct_burdens_many([build_netlist(d) for d in docs])
    for a, b in zip(single, batch, strict=True):
        assert a.keys() == b.keys()
        for ct in a:
            assert b[ct].ground_fault == pytest.approx(a[ct].ground_fault, abs=1e-12)
            assert b[ct].phase_fault == pytest.approx(a[ct].phase_fault, abs=1e-12)
            assert b[ct].circuit == a[ct].circuit


def test_a_site_whose_only_ct_is_unwired_reports_it_open():
    b = SiteBuilder()
    b.equipment("CB", max_load_a=100)
    b.ct("CT", equipment="CB")
    nl = build_netlist(b.build())
    assert ct_burdens(nl)["CT"].ground_fault is None
    assert find_circuits(nl)[0].open_cts == ("CT",)
