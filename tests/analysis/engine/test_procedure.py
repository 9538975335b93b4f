"""Procedure verdicts: the JSON of design.md, stored procedures, regions, the reporting rule."""

from __future__ import annotations

import json

import pytest

from analysis.engine import ProcedureError, build_netlist, check_operations, check_procedure
from analysis.engine.cautions import cautions
from tests.analysis.engine.builders import wye_panel

SAFE_STEPS = [
    {"set": "TS-1/T1", "to": "open"},
    {"set": "TS-1/A", "to": "open"},
    {"set": "TS-1/B", "to": "open"},
    {"set": "TS-1/C", "to": "open"},
    {"remove_device": "R-1"},
]


def _site(steps, devices=("R-1",)):
    b = wye_panel(test_switch=True, trip=True, z_residual_ohm=0.2, code="HCX")
    b.procedure("P-SAFE", SAFE_STEPS, devices)
    b.procedure("P-BAD", steps, devices)
    return build_netlist(b.build())


def test_verdict_json_has_the_shape_of_design_md():
    nl = _site([{"set": "TS-1/A", "to": "open"}])
    body = check_procedure(nl, "P-BAD").to_json("HCX")
    assert list(body) == ["site", "procedure", "safe", "first_danger", "steps", "cautions"]
    assert body["site"] == "HCX" and body["procedure"] == "P-BAD" and body["safe"] is False
    assert body["first_danger"] == {
        "step": 1,
        "stage": "transition",
        "code": "trip_not_isolated",
        "ct": None,
        "device": "R-1",
        "input": "IA",
    }
    assert list(body["steps"][0]) == ["step", "op", "findings", "readings"]
    assert body["steps"][0]["op"] is None and body["steps"][0]["findings"] == []
    assert body["steps"][1]["op"] == {"set": "TS-1/A", "to": "open"}
    finding = body["steps"][1]["findings"][0]
    assert list(finding) == [
        "code",
        "severity",
        "stage",
        "ct",
        "device",
        "input",
        "circuit",
        "message",
    ]
    assert finding["severity"] == "danger" and finding["device"] == "R-1"
    assert body["cautions"] == cautions()


def test_a_safe_stored_procedure():
    v = check_procedure(_site([]), "P-SAFE")
    assert v.safe and v.first_danger is None
    assert [s.step for s in v.steps] == [0, 1, 2, 3, 4, 5]
    # IA, IB, IC each reported once, where it starts. The residual input IN carries about
    # 0 A in the balanced normal state but still sees a ground fault on any phase whose CT
    # reaches it; once the third pole is shorted no CT reaches it any more, so it is bypassed
    # at step 4 with the ground functions lost (design.md, input_bypassed; common practice,
    # no source)
    reported = [(s.step, f.input) for s in v.steps for f in s.findings]
    assert reported == [(2, "IA"), (3, "IB"), (4, "IC"), (4, "IN")]
    (f_in,) = [f for f in v.steps[4].findings if f.input == "IN"]
    assert f_in.numbers["functions"] == ["50N", "51N"]
    (f_ia,) = v.steps[2].findings
    assert f_ia.numbers["functions"] == ["50", "51"]  # IN measures the residual itself
    assert all(f.code == "input_bypassed" for s in v.steps for f in s.findings)


def test_unknown_procedure_and_device_are_errors():
    nl = _site([])
    with pytest.raises(ProcedureError, match="unknown procedure 'P-X'"):
        check_procedure(nl, "P-X")
    with pytest.raises(ProcedureError, match="unknown device 'R-X'"):
        check_operations(nl, [], ["R-X"])


def test_stored_step_error_says_which_step():
    nl = _site([{"set": "TS-1/T1", "to": "open"}, {"set": "TS-1/Q", "to": "open"}])
    # step 2 of the verdict is the second operation: /steps/1 in the site document
    with pytest.raises(ProcedureError) as caught:
        check_procedure(nl, "P-BAD")
    assert str(caught.value).startswith(
        "step 2 (/procedures/1/steps/1/set): unknown switch 'TS-1/Q' (did you mean"
    )


def test_only_the_region_the_procedure_touches_is_checked():
    """A second, separate panel with an open CT is outside the procedure: its open secondary
    does not enter this verdict."""
    doc = wye_panel(test_switch=True, trip=True).build()
    text = json.dumps(wye_panel(code="X").build())
    other = json.loads(text.replace("CB-1", "CB-9").replace("R-1", "R-9").replace("TB-1", "TB-9"))
    for key in ("equipment", "cts", "devices", "wires", "links", "grounds"):
        doc[key] += other[key]
    doc["wires"] = [w for w in doc["wires"] if w["from"] != "CB-9-A:X1"]
    nl = build_netlist(doc)
    v = check_operations(nl, SAFE_STEPS, ["R-1"])
    assert v.safe
    assert all(f.ct is None or f.ct.startswith("CB-1") for _, f in v.findings)
    wide = check_operations(nl, [{"note": "look at R-9"}], ["R-9"])
    assert [(f.code, f.ct) for f in wide.steps[0].findings] == [("open_secondary", "CB-9-A")]
