"""Invariants of the state rules, by hypothesis (style.md practice 8), on wye panels with
random leads, burdens and loads:

- a relay with ground elements and phase inputs only, its trip connected, sees a calculated
  residual equal to the shorted phase's load current when one phase is shorted to the
  neutral upstream (Kirchhoff: with CT current sources and the relay star tied to the
  neutral, the shorted phase's input carries nothing and 3I0 = I_B + I_C = −I_A);
- shorting and restoring the phases of a phase-only 50/51 relay, in any order, with its trip
  connected is never ``trip_not_isolated``: its currents only fall and come back to normal
  (design.md rule (c));
- de-energizing the equipment is never ``input_bypassed`` (design.md, input_bypassed).

The rules are common practice, no source.
"""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from analysis.engine import build_netlist, check_operations
from tests.analysis.engine.builders import wye_panel

SETTINGS = settings(max_examples=30, deadline=None)
IMPEDANCE = st.builds(complex, st.floats(0.02, 2.0), st.sampled_from([0.0, 0.05, 0.5, 2.0]))


def _panel(r_lead: float, z: complex, load: float, functions: tuple[str, ...], **kw):
    b = wye_panel(r_lead_ohm=r_lead, z_relay_ohm=z, max_load_a=load, trip=True, **kw)
    b.doc["devices"][0]["functions"] = list(functions)
    return build_netlist(b.build())


@SETTINGS
@given(
    r_lead=st.floats(0.05, 3.0),
    z=IMPEDANCE,
    load=st.floats(60.0, 1200.0),
    phase=st.sampled_from("ABC"),
    test_switch=st.booleans(),
)
def test_a_phase_shorted_upstream_makes_a_calculated_residual_of_its_load(
    r_lead, z, load, phase, test_switch
):
    nl = _panel(r_lead, z, load, ("50", "51", "50N", "51N"), test_switch=test_switch)
    v = check_operations(nl, [{"add_jumper": [f"TB-1:{phase}", "TB-1:N"], "id": "J1"}])
    trips = [f for f in v.steps[1].findings if f.code == "trip_not_isolated"]
    assert [(f.device, f.input) for f in trips] == [("R-1", "3I0")]
    expected_a = load * 5 / 400  # every CT of the panel is 400:5
    assert abs(trips[0].numbers["to_a"] - expected_a) < 1e-3 * expected_a + 1e-4


@SETTINGS
@given(
    r_lead=st.floats(0.05, 3.0),
    z=IMPEDANCE,
    load=st.floats(60.0, 1200.0),
    order=st.permutations("ABC"),
    back=st.permutations("ABC"),
    transition=st.sampled_from(["make_before_break", "simultaneous"]),
)
def test_phases_shorted_and_restored_never_trip_a_phase_relay(
    r_lead, z, load, order, back, transition
):
    nl = _panel(r_lead, z, load, ("50", "51"), test_switch=True, transition=transition)
    ops = [{"set": f"TS-1/{p}", "to": "open"} for p in order]
    ops += [{"set": f"TS-1/{p}", "to": "closed"} for p in back]
    v = check_operations(nl, ops)
    assert [f.code for _, f in v.findings if f.code == "trip_not_isolated"] == []
    assert v.safe


@SETTINGS
@given(
    r_lead=st.floats(0.05, 3.0),
    z=IMPEDANCE,
    residual=st.one_of(st.none(), IMPEDANCE),
    shorted=st.lists(st.sampled_from("ABC"), unique=True, max_size=2),
)
def test_deenergizing_is_never_a_bypass(r_lead, z, residual, shorted):
    nl = _panel(
        r_lead, z, 320.0, ("50", "51", "50N", "51N"), test_switch=True, z_residual_ohm=residual
    )
    ops = [{"set": "TS-1/T1", "to": "open"}]
    ops += [{"set": f"TS-1/{p}", "to": "open"} for p in shorted]
    before = check_operations(nl, ops)
    v = check_operations(nl, [*ops, {"deenergize": "CB-1"}])
    last = len(ops) + 1
    assert [f.code for f in v.steps[last].findings if f.code == "input_bypassed"] == []
    assert [s.findings for s in v.steps[:last]] == [s.findings for s in before.steps]
