"""Invariants of the checker and the solver, by hypothesis (style.md practice 8).

- opening any series element of a live CT loop without a short gives ``open_secondary``;
- a CT shorted at its terminals is never reported open, whatever is opened elsewhere;
- a break-before-make operation on a CT pole with a shorting jaw always flags its transition;
- burden never decreases when a lead gets longer (Rayleigh's monotonicity law for resistive
  networks, from memory; for the RL panels the lead is in series with the loop);
- every plan the planner returns passes the checker, and its restoration closes no trip
  pole before the CT circuits are back as they normally are;
- a tapped winding with sections shorted keeps the ampere-turn balance of its core and never
  gives a device more than the single-source current (windings.py);
- a switch with more than two positions passes every position between the old and the new
  one: the move opens a live CT exactly when one of those positions (or the new one) does;
- every plan opens its trips first and closes them last: no CT-side operation before the
  last trip is opened or after the first is closed, the device's outputs are parted before
  the first CT operation, and every relay whose currents differ from normal in some state of
  the plan has its trips open in that state (common practice, no source).
"""

from __future__ import annotations

import random

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from analysis.engine import build_netlist, check_operations, ct_burdens, plan_isolation
from analysis.engine.state import apply_op, evaluate_states, normal_state
from tests.analysis.engine.builders import SiteBuilder, wye_panel
from tests.analysis.engine.generators import random_mesh
from tests.analysis.engine.test_state_checks import residual_panel

SETTINGS = settings(max_examples=60, deadline=None)

ELEMENTS = st.lists(st.sampled_from(["wire", "input", "link", "knife"]), min_size=1, max_size=8)


def _series_loop(kinds: list[str], values: list[float]) -> tuple[SiteBuilder, list[dict]]:
    """CT X1 → element 1 → … → element n → X2; for each element, the operation opening it."""
    b = SiteBuilder("SER")
    b.equipment("CB", max_load_a=500)
    b.ct("CT", equipment="CB")
    b.ground("CT:X2")
    opens: list[dict] = []
    prev = "CT:X1"
    for k, (kind, v) in enumerate(zip(kinds, values, strict=False)):
        nxt = f"TB:{k}" if k < len(kinds) - 1 else "CT:X2"
        if kind == "wire":
            b.wire(prev, nxt, v)
            opens.append({"lift": [prev, nxt]})
        elif kind == "input":
            b.device(f"D{k}", inputs=[("I", prev, nxt, complex(v, v / 2))])
            opens.append({"remove_device": f"D{k}"})
        elif kind == "link":
            b.link(prev, nxt)
            opens.append({"lift": [prev, nxt]})
        else:
            b.switch(f"S{k}", [(prev, nxt, ("closed",))], transition="simultaneous")
            opens.append({"set": f"S{k}", "to": "open"})
        prev = nxt
    return b, opens


@SETTINGS
@given(
    kinds=ELEMENTS,
    values=st.lists(st.floats(0.01, 5.0), min_size=8, max_size=8),
    pick=st.integers(0, 7),
)
def test_opening_any_series_element_of_a_live_loop_opens_the_secondary(kinds, values, pick):
    b, opens = _series_loop(kinds, values)
    nl = build_netlist(b.build())
    op = opens[pick % len(opens)]
    v = check_operations(nl, [op])
    assert [f.ct for f in v.steps[1].findings if f.code == "open_secondary"] == ["CT"]
    assert v.steps[0].findings == ()


@SETTINGS
@given(seed=st.integers(0, 10_000), lifts=st.lists(st.integers(0, 200), max_size=6))
def test_a_ct_shorted_at_its_terminals_is_never_open(seed, lifts):
    doc = random_mesh(random.Random(seed), seed)
    nl = build_netlist(doc)
    ct = doc["cts"][0]["code"]
    ops: list[dict] = [{"add_jumper": [f"{ct}:X1", f"{ct}:X2"], "id": "JS"}]
    lifted: set[frozenset[str]] = set()
    for k in lifts:
        w = doc["wires"][k % len(doc["wires"])]
        ends = frozenset((w["from"], w["to"]))
        if ends not in lifted:  # lifting what is already lifted is refused
            lifted.add(ends)
            ops.append({"lift": [w["from"], w["to"]]})
    v = check_operations(nl, ops)
    for step in v.steps[1:]:
        assert ct not in [f.ct for f in step.findings if f.code == "open_secondary"]


@SETTINGS
@given(
    phase=st.sampled_from(["A", "B", "C"]),
    load=st.floats(10, 3000),
    residual=st.booleans(),
    closing=st.booleans(),
)
def test_break_before_make_on_a_shorting_pole_flags_its_transition(phase, load, residual, closing):
    nl = build_netlist(
        wye_panel(
            test_switch=True,
            transition="break_before_make",
            max_load_a=load,
            z_residual_ohm=0.2 if residual else None,
        ).build()
    )
    pole = f"TS-1/{phase}"
    ops = [{"set": pole, "to": "open"}]
    if closing:
        ops.append({"set": pole, "to": "closed"})
    v = check_operations(nl, ops)
    step = v.steps[-1]
    opened = [(f.stage, f.ct) for f in step.findings if f.code == "open_secondary"]
    assert opened == [("transition", f"CB-1-{phase}")]
    # the current the open CT would drive: load / (400/5) (design.md, state currents)
    assert f"{load * 5 / 400:.2f} A secondary" in step.findings[0].message


@SETTINGS
@given(seed=st.integers(0, 10_000), which=st.integers(0, 100), extra_m=st.floats(0.0, 500.0))
def test_burden_never_decreases_when_a_lead_gets_longer_resistive_mesh(seed, which, extra_m):
    rng = random.Random(seed)
    doc = random_mesh(rng, seed)
    for d in doc["devices"]:
        for i in d["inputs"]:
            i["burden_ohm"] = [i["burden_ohm"][0], 0.0]
    w = doc["wires"][which % len(doc["wires"])]
    w.pop("r_ohm")
    w.update(size="12AWG", length_m=rng.uniform(1, 300))
    before = ct_burdens(build_netlist(doc))
    w["length_m"] += extra_m
    after = ct_burdens(build_netlist(doc))
    for ct, b in before.items():
        if b.ground_fault is None:
            continue
        # the CT alone sees a driving-point resistance, to which Rayleigh's law applies (the
        # phase-fault case has other sources injecting and is no driving-point quantity)
        assert after[ct].ground_fault.real >= b.ground_fault.real - 1e-12


@SETTINGS
@given(
    r_lead=st.floats(0.01, 3),
    extra=st.floats(0, 3),
    z=st.complex_numbers(max_magnitude=3).filter(lambda c: c.real > 0.01 and c.imag >= 0),
)
def test_burden_magnitude_grows_with_the_lead_in_a_wye_panel(r_lead, extra, z):
    short = ct_burdens(build_netlist(wye_panel(r_lead_ohm=r_lead, z_relay_ohm=z).build()))
    long = ct_burdens(build_netlist(wye_panel(r_lead_ohm=r_lead + extra, z_relay_ohm=z).build()))
    for ct in short:
        assert abs(long[ct].ground_fault) >= abs(short[ct].ground_fault) - 1e-12
        assert abs(long[ct].phase_fault) >= abs(short[ct].phase_fault) - 1e-12


@settings(max_examples=50, deadline=None)
@given(
    test_switch=st.booleans(),
    draw_out=st.booleans(),
    trip=st.booleans(),
    transition=st.sampled_from(["make_before_break", "break_before_make", "simultaneous"]),
    residual=st.booleans(),
    load=st.one_of(st.none(), st.floats(5, 2000)),
)
def test_every_plan_the_planner_returns_passes_the_checker(
    test_switch, draw_out, trip, transition, residual, load
):
    nl = build_netlist(
        wye_panel(
            test_switch=test_switch,
            draw_out=draw_out,
            trip=trip,
            transition=transition,
            max_load_a=load,
            z_residual_ohm=0.2 if residual else None,
        ).build()
    )
    plan = plan_isolation(nl, "R-1")
    if not plan.possible:
        assert plan.isolate == () and plan.jumpers_needed
        return
    verdict = check_operations(nl, [*plan.isolate, *plan.restore], ["R-1"])
    assert verdict.safe, verdict.first_danger
    assert plan.verdict is not None and plan.verdict.safe


@settings(max_examples=30, deadline=None)
@given(
    device=st.sampled_from(["R-50", "R-50N"]),
    transition=st.sampled_from(["make_before_break", "break_before_make", "simultaneous"]),
    load=st.one_of(st.none(), st.floats(5, 2000)),
)
def test_every_plan_restores_the_ct_circuits_before_the_trips(device, transition, load):
    """Phase and residual relays with their own trip poles (restore the CT circuits, verify,
    then restore the trips; common practice, no source)."""
    b = residual_panel(transition=transition)
    b.doc["equipment"][0].pop("max_load_a", None)
    if load is not None:
        b.doc["equipment"][0]["max_load_a"] = load
    nl = build_netlist(b.build())
    plan = plan_isolation(nl, device)
    if not plan.possible:
        assert plan.isolate == () and plan.jumpers_needed
        return
    verdict = check_operations(nl, [*plan.isolate, *plan.restore], [device])
    assert verdict.safe, verdict.first_danger
    assert not [f for _, f in verdict.findings if f.code == "trip_not_isolated"]
    poles = {f"TS-1/{p}": "closed" for p in "ABC"}
    for op in plan.isolate:
        if op.get("set") in poles:
            poles[op["set"]] = op["to"]
    jumpers = sum("add_jumper" in op for op in plan.isolate)
    for op in plan.restore:
        if op.get("set") in poles:
            poles[op["set"]] = op["to"]
        jumpers += ("add_jumper" in op) - ("remove_jumper" in op)
        if op.get("set") in ("TS-1/T1", "TS-1/T2") and op["to"] == "closed":
            assert set(poles.values()) <= {"closed"} and jumpers == 0, plan.restore


@settings(max_examples=25, deadline=None)
@given(
    device=st.sampled_from(["R-50", "R-50N"]),
    transition=st.sampled_from(["make_before_break", "break_before_make", "simultaneous"]),
    extra_breakers=st.integers(0, 2),
)
def test_the_fast_planner_is_as_short_as_breadth_first_search(device, transition, extra_breakers):
    """The greedy search with its lower-bound proof, the nearest-switches-first search and A*
    back to normal return plans as short as plain breadth-first search over every switch.
    Extra shorting blocks (switches that do not help) are added to the circuit's neutral."""
    b = residual_panel(transition=transition)
    for k in range(extra_breakers):
        b.switch(
            f"TB-X{k}/SS",
            [("TB-1:N", f"TB-X{k}:1", ("shorted",))],
            kind="shorting_screw",
            positions=("open", "shorted"),
            normal="open",
        )
    nl = build_netlist(b.build())
    plan = plan_isolation(nl, device)
    from tests.analysis.engine.test_plan import _bfs_lengths, _ct_ops

    iso, back = _bfs_lengths(nl, device)
    if iso is None or back is None:
        # switches alone cannot do it: the planner then tries temporary jumpers
        assert not plan.possible or any("add_jumper" in op for op in plan.isolate)
        return
    assert (len(_ct_ops(plan.isolate)), len(_ct_ops(plan.restore))) == (iso, back)


@SETTINGS
@given(
    steps=st.lists(st.integers(1, 80), min_size=2, max_size=4),
    tap=st.tuples(st.integers(0, 4), st.integers(0, 4)),
    jumpers=st.lists(st.tuples(st.integers(0, 4), st.integers(0, 4)), max_size=2),
    z=st.tuples(st.floats(0.05, 5.0), st.floats(0.0, 3.0)),
    winding_ohm=st.floats(0.01, 2.0),
    load=st.floats(10, 3000),
)
def test_tapped_winding_with_sections_shorted(steps, tap, jumpers, z, winding_ohm, load):
    """A multi-ratio CT (3 to 5 terminals, positions in steps of 5 A) into one relay input, with
    up to two jumpers between winding terminals (windings.py: coupled sections of one core).

    - ampere-turn balance of the one core: Σ N_k · j_k = ±I_p (the primary load, one turn);
    - Kirchhoff at the first terminal: what the sections deliver there is the relay's current;
    - a shorted section never raises the relay current above the single-source value
      I_p / N_tap (for an external loop of R ≥ 0 the divisor |N + c·Z| only grows, c ≥ 0);
    - with nothing across the winding but the tap, the single-source value exactly; with a
      1 GΩ path across part of the winding instead of a jumper, that value to 10⁻³ (the coupled
      stamp and the ideal source agree as the diverted current vanishes; it is of the order
      Z·(N_path / N_tap)² / 1 GΩ, at most 3·10⁻⁴ here).
    """
    n = len(steps) + 1
    names = [f"X{k + 1}" for k in range(n)]
    positions = {names[0]: 0.0}
    for k, s in enumerate(steps):
        positions[names[k + 1]] = positions[names[k]] + 5.0 * s
    i, j = tap[0] % n, tap[1] % n
    if i == j:
        j = (i + 1) % n
    first, second = names[i], names[j]
    ideal = load * 5 / abs(positions[first] - positions[second])

    def solve(extra: list[tuple[str, str]], high_z: tuple[str, str] | None = None):
        b = SiteBuilder("TAPS")
        b.equipment("CB", max_load_a=load)
        b.ct("CT", equipment="CB", terminals=positions, in_use=(first, second))
        b.doc["cts"][0]["winding_ohm"] = winding_ohm
        inputs = [("I", "R:1", "R:2", complex(*z))]
        if high_z is not None:
            inputs.append(("HZ", f"CT:{high_z[0]}", f"CT:{high_z[1]}", 1e9))
        b.device("R", inputs=inputs)
        b.wire(f"CT:{first}", "R:1", 0.2)
        b.wire("R:2", f"CT:{second}", 0.2)
        b.ground("R:2")
        nl = build_netlist(b.build())
        st_ = normal_state(nl)
        for k, (a, c) in enumerate(extra):
            _, st_ = apply_op(nl, st_, {"add_jumper": [f"CT:{a}", f"CT:{c}"], "id": f"J{k}"}, 1)
        return evaluate_states(nl, [st_])[0]

    pairs = [(names[a % n], names[c % n]) for a, c in jumpers if a % n != c % n]
    ev = solve(pairs)
    relay = ev.inp_cur[0]
    sections = ev.sections("CT")
    balance = sum(t * cur for _, _, t, cur in sections)
    assert abs(abs(balance) - load) <= 1e-7 * load
    assert abs(ev.delivered("CT") - relay) <= 1e-7 * ideal + 1e-9
    assert abs(relay) <= ideal * (1 + 1e-9)
    if not pairs:
        assert abs(relay) == pytest.approx(ideal, rel=1e-12)
    else:
        a, c = pairs[0]
        if {a, c} != {first, second}:
            loose = solve([], high_z=(a, c)).inp_cur[0]
            assert abs(abs(loose) - ideal) <= 1e-3 * ideal


def _trips_first_and_last(nl, device, plan):
    """The checks of the trips-first-and-last property on one plan (see the docstring)."""
    from analysis.engine.plan import _stripped, _trip_path_switches
    from analysis.engine.procedure import simulate
    from analysis.engine.state import APPEAR_FROM, evaluate_states, normal_state

    trips = _trip_path_switches(nl)
    for step in (*plan.isolate, *plan.restore):
        assert isinstance(step["why"], str) and step["why"] and "\n" not in step["why"]
        assert all(set(r) <= {"between", "a", "parallel"} for r in step["readings"])
    assert plan.verdict is not None and plan.verdict.safe == plan.possible
    iso, back = _stripped(list(plan.isolate)), _stripped(list(plan.restore))

    def kind(op):
        return "note" if "note" in op else "trip" if op.get("set") in trips else "ct"

    k_iso = [kind(op) for op in iso]
    k_back = [kind(op) for op in back]
    # isolate: trips, then CT work, then the closing note
    assert k_iso == sorted(k_iso, key=["trip", "ct", "note"].index), k_iso
    assert k_iso[-1] == "note"
    # restore: CT work, the verify note, then the trips
    assert k_back == sorted(k_back, key=["ct", "note", "trip"].index), k_back
    assert k_back.count("note") == 1 and back[k_back.index("note")]["note"].startswith("verify")
    # the trips closed are exactly those opened, in the reverse order, to normal
    opened = [op["set"] for op in iso if kind(op) == "trip"]
    assert [op["set"] for op in back if kind(op) == "trip"] == opened[::-1]
    ops = iso + back
    sim = simulate(nl, ops)
    start = normal_state(nl)
    assert sim[-1][1].positions == start.positions and sim[-1][1].jumpers == ()
    states = [start] + [x for passed, after in sim for x in (*passed, after)]
    evs = evaluate_states(nl, states)
    norm = evs[0]
    n_trips = k_iso.count("trip")
    dev = nl.devices[device]
    after_trips = evs[len([x for p, a in sim[:n_trips] for x in (*p, a)])]
    assert not any(after_trips.out_connected[o.index] for o in dev.outputs)
    for ev in evs:
        for d in nl.devices.values():
            if not d.outputs or not d.is_relay:
                continue
            off = any(
                abs(ev.inp_cur[i.index] - norm.inp_cur[i.index])
                > APPEAR_FROM * max(norm.inp_ref_a[i.index], 1e-9)
                for i in d.inputs
            )
            if off:
                assert not any(ev.out_connected[o.index] for o in d.outputs), (d.code, ops)


@settings(max_examples=40, deadline=None)
@given(
    draw_out=st.booleans(),
    transition=st.sampled_from(["make_before_break", "break_before_make", "simultaneous"]),
    residual=st.booleans(),
    load=st.one_of(st.none(), st.floats(5, 2000)),
)
def test_every_plan_opens_the_trips_first_and_closes_them_last(
    draw_out, transition, residual, load
):
    nl = build_netlist(
        wye_panel(
            test_switch=True,
            draw_out=draw_out,
            trip=True,
            transition=transition,
            max_load_a=load,
            z_residual_ohm=0.2 if residual else None,
        ).build()
    )
    plan = plan_isolation(nl, "R-1")
    assert plan.possible, plan.reason
    _trips_first_and_last(nl, "R-1", plan)


@settings(max_examples=30, deadline=None)
@given(
    device=st.sampled_from(["R-50", "R-50N"]),
    transition=st.sampled_from(["make_before_break", "break_before_make", "simultaneous"]),
    load=st.floats(5, 2000),
)
def test_every_plan_opens_the_trips_of_the_relays_it_disturbs_first(device, transition, load):
    """A phase and a residual relay in series (each with its own trip pole): whichever is
    worked on, the other's currents change, so its trip is opened first and closed last."""
    b = residual_panel(transition=transition)
    b.doc["equipment"][0]["max_load_a"] = load
    nl = build_netlist(b.build())
    plan = plan_isolation(nl, device)
    if not plan.possible:
        assert plan.isolate == () and plan.jumpers_needed
        return
    _trips_first_and_last(nl, device, plan)
    opened = {op["set"] for op in plan.isolate if op.get("set") in ("TS-1/T1", "TS-1/T2")}
    assert opened == {"TS-1/T1", "TS-1/T2"}


@settings(max_examples=60, deadline=None)
@given(
    closes=st.lists(st.booleans(), min_size=3, max_size=6),
    start=st.integers(0, 5),
    end=st.integers(0, 5),
)
def test_a_multi_position_switch_is_checked_in_every_position_it_passes(closes, start, end):
    """A rotary switch (kind ``other``) whose position k closes the CT onto the meter when
    ``closes[k]``; it starts in a closing position and is set to another. Simultaneous
    contacts, so the only states on the way are the positions passed (common practice, no
    source: a rotary switch rests in each position it passes)."""
    n = len(closes)
    start, end = start % n, end % n
    closes = list(closes)
    closes[start] = True
    if start == end:
        return
    b = SiteBuilder("ROT")
    b.equipment("CB", max_load_a=320)
    b.ct("CT", equipment="CB")
    b.wire("CT:X1", "TB:1", 0.2)
    b.wire("CT:X2", "TB:N", 0.2)
    b.ground("TB:N")
    positions = tuple(f"P{k}" for k in range(n))
    segments = [("TB:1", "RS:1", (positions[k],)) for k in range(n) if closes[k]]
    b.switch(
        "RS",
        segments,
        kind="other",
        positions=positions,
        normal=positions[start],
        transition="simultaneous",
    )
    b.device("M", kind="meter", inputs=[("I", "RS:1", "TB:N", 0.05)])
    v = check_operations(build_netlist(b.build()), [{"set": "RS", "to": positions[end]}])
    step = 1 if end > start else -1
    passed = [closes[k] for k in range(start + step, end + step, step)]
    opened = [f.stage for f in v.steps[1].findings if f.code == "open_secondary"]
    if all(passed):
        assert opened == []
    elif all(passed[:-1]):
        assert opened == ["after"]  # only the new position is open
    else:
        assert opened[0] == "transition"
