"""Circuit drawings: the elements of the record are drawn and named, the same record gives the
same bytes, and a step's state shows on the drawing with text and line style, not colour
alone (issue 13 item 3). The conventions drawn (polarity at the X1 end, knife and shorting jaw
of a CT test-switch pole, a shorting path confirmed by its current) are common practice, no
source."""

from __future__ import annotations

import copy
import json
import random
import re
import subprocess
from pathlib import Path

import pytest

from analysis.actions import draft_check, procedure_check
from analysis.drawing import (
    DrawingError,
    circuit_dot,
    circuit_svg,
    procedure_svgs,
    region,
    step_states,
)
from analysis.engine import build_netlist
from tests.analysis.engine.builders import wye_panel
from tests.analysis.engine.generators import random_delta, random_mesh, random_parallel, random_wye

DEMO = Path(__file__).resolve().parents[3] / "fixtures" / "demo"


def _quillfen() -> dict:
    return json.loads((DEMO / "quillfen.json").read_text())


def _panel() -> dict:
    """A 3-phase wye set into a relay with a residual input, through a test switch with
    shorting jaws and a draw-out case, with a trip pole."""
    return wye_panel(
        z_residual_ohm=0.5, test_switch=True, draw_out=True, trip=True, code="PNL"
    ).build()


def _ids(svg: str) -> set[str]:
    return set(re.findall(r'id="(lk-[^"]+)"', svg))


def _texts(svg: str) -> str:
    return " ".join(re.findall(r">([^<>]+)</text>", svg))


def test_same_record_same_bytes() -> None:
    doc = _quillfen()
    one = circuit_svg(doc, device="R-131")
    two = circuit_svg(build_netlist(copy.deepcopy(doc)), device="R-131")
    assert one == two
    assert one.startswith("<svg ")
    assert 'role="img"' in one


def test_wye_set_with_residual_relay_is_drawn_and_labelled() -> None:
    svg = circuit_svg(_panel(), device="R-1", highlight=["R-1"])
    ids = _ids(svg)
    text = _texts(svg)
    for p in "ABC":
        assert f"lk-ct-CB-1-{p}" in ids
        assert f"lk-input-R-1-I{p}" in ids
        assert f"lk-contact-TS-1_{p}-0" in ids  # knife
        assert f"lk-contact-TS-1_{p}-1" in ids  # shorting jaw
    assert "lk-input-R-1-IN" in ids  # the residual input in the common return
    assert "lk-ground-TB-1_N" in ids
    assert "lk-block-TB-1" in ids
    assert "lk-switch-TS-1" in ids
    assert "lk-device-R-1" in ids
    assert "input IN" in text
    assert "TS-1/A knife" in text and "TS-1/A shorting jaw" in text
    assert "DC-1 (draw out case): inserted" in text
    # each pole is listed with its test switch, not with the block its line side lands on
    ts = re.search(r'id="lk-switch-TS-1".*?</g>\s*(?=<g id="lk-)', svg, re.S)
    assert ts is not None and "TS-1/A (test switch pole):" in ts.group(0)
    block = re.search(r'id="lk-block-TB-1".*?</g>\s*(?=<g id="lk-)', svg, re.S)
    assert block is not None and "test switch pole" not in block.group(0)
    assert "tap X1-X2 400:5" in text
    # 320 A maximum load through 400:5 drives 4.00 A in each phase CT
    assert text.count("drives 4.00 A") == 3
    assert "WORK ON" in text
    # the trip output and the breaker coil it operates
    assert "TRIP output, operates CB-1:TC" in text
    assert not {i for i in ids if i.startswith("lk-open-")}  # normal state: nothing open


def test_87b_summation_of_four_sets_is_drawn() -> None:
    svg = circuit_svg(_quillfen(), device="R-87B")
    ids = _ids(svg)
    text = _texts(svg)
    cts = {i for i in ids if i.startswith("lk-ct-")}
    # four breakers' 87B sets, paralleled phase by phase (fixtures/demo/README.md)
    assert cts == {f"lk-ct-CB-13{b}-D{p}" for b in "0123" for p in "ABC"}
    for b in "0123":
        assert f"lk-block-TB-13{b}D" in ids
        assert f"TB-13{b}D/SS (shorting screw): open" in text
    # a lead says what it is, as recorded (CB-131-DA:X1 to TB-131D:1: 10AWG, 260 ft)
    assert "10AWG 260 ft" in text
    assert "lk-block-TB-87B" in ids
    assert "lk-switch-TS-87B" in ids
    assert {f"lk-input-R-87B-I{p}" for p in "ABC"} <= ids


@pytest.mark.parametrize(("device", "site"), [("R-131", "quillfen"), ("R-87B", "quillfen")])
def test_every_element_of_the_part_is_drawn(device: str, site: str) -> None:
    doc = json.loads((DEMO / f"{site}.json").read_text())
    nl = build_netlist(doc)
    inside = region(nl, device=device)
    svg = circuit_svg(nl, device=device)
    ids = _ids(svg)
    wires = {f"lk-wire-{w.index}" for w in nl.wires if w.a in inside}
    links = {f"lk-link-{k.index}" for k in nl.links if k.a in inside}
    contacts = {
        f"lk-contact-{s.code.replace('/', '_')}-{k}"
        for s in nl.switches.values()
        for k, c in enumerate(s.contacts)
        if c.a in inside
    }
    cts = {f"lk-ct-{c.code}" for c in nl.ct_list if c.first in inside}
    inputs = {f"lk-input-{i.device}-{i.name}" for i in nl.inputs if i.a in inside}
    assert wires and contacts and cts and inputs
    for group in (wires, links, contacts, cts, inputs):
        assert group <= ids
    # and nothing of another circuit: every drawn CT is one of the part's
    assert {i for i in ids if i.startswith("lk-ct-")} == cts
    # an element joins terminals of the part only (the part is closed over every element)
    assert all((w.a in inside) == (w.b in inside) for w in nl.wires)


def test_unknown_part_is_refused_with_what_exists() -> None:
    with pytest.raises(DrawingError, match=r"no device 'R-999'.*R-131"):
        circuit_svg(_quillfen(), device="R-999")
    with pytest.raises(DrawingError, match="no circuit"):
        circuit_svg(_quillfen(), circuit="CKT-NOPE")


def test_open_ct_drawn_red_with_text_and_shape() -> None:
    doc = _panel()
    ops = [{"lift": ["CB-1-B:X1", "TB-1:B"]}]
    verdict = draft_check(doc, ops, ["R-1"])
    assert not verdict["safe"]
    states = step_states(doc, verdict)
    assert [s.step for s in states] == [0, 1]
    assert states[1].open_cts == {"CB-1-B"}
    svg = circuit_svg(doc, device="R-1", state=states[1])
    text = _texts(svg)
    assert "lk-open-CB-1-B" in _ids(svg)
    assert "doubleoctagon" not in svg  # shapes are drawn, not named
    assert re.search(r'id="lk-open-CB-1-B".*?<polygon', svg, re.S)
    assert "OPEN SECONDARY" in text and "SECONDARY" in text
    assert "LIFTED" in text
    assert "DANGER" in text
    assert "#b3261e" in svg  # and red as well


def test_shorting_jaw_carries_its_reading() -> None:
    doc = _panel()
    ops = [{"set": "TS-1/A", "to": "open"}]
    verdict = draft_check(doc, ops, [])
    svgs = procedure_svgs(doc, verdict, device="R-1")
    assert len(svgs) == 2
    before, after = _texts(svgs[0]), _texts(svgs[1])
    assert "lk-short" not in svgs[0] and "SHORT 0" not in before
    jaw = next(r for r in verdict["steps"][1]["readings"] if "TS-1:SB" in r["between"])
    assert jaw["a"] > 0
    assert f"SHORT {jaw['a']:.2f} A" in after
    assert "TS-1/A knife" in after and "open" in after
    # the residual input now sees the phase A current: the verdict's danger is on the drawing
    assert "DANGER" in after and "trip_not_isolated" in after
    assert 'lk-contact lk-closed lk-short"' in svgs[1]
    assert 'lk-contact lk-open"' in svgs[1]


def test_several_devices_draw_the_union_of_their_parts() -> None:
    doc = _quillfen()
    ids = _ids(circuit_svg(doc, devices=["R-131", "R-132"]))
    assert {"lk-ct-CB-131-A", "lk-ct-CB-132-A", "lk-device-R-131", "lk-device-R-132"} <= ids
    assert "lk-ct-CB-133-A" not in ids


def test_deenergized_and_removed_are_written_out() -> None:
    doc = _panel()
    ops = [{"deenergize": "CB-1"}, {"set": "DC-1", "to": "withdrawn"}, {"remove_device": "R-1"}]
    verdict = draft_check(doc, ops, ["R-1"])
    last = step_states(doc, verdict)[-1]
    assert last.removed == {"R-1"} and "CB-1" not in (last.energized or ())
    svg = circuit_svg(doc, device="R-1", state=last)
    text = _texts(svg)
    assert text.count("de-energized") == 3
    assert "drives" not in text
    assert "REMOVED" in text
    assert "DC-1 (draw out case): withdrawn" in text
    assert "lk-removed" in svg


def test_jumper_drawn_as_a_shorting_path_with_its_current() -> None:
    doc = _panel()
    ops = [{"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J1"}]
    verdict = draft_check(doc, ops, [])
    reading = next(
        r for r in verdict["steps"][1]["readings"] if set(r["between"]) == {"TB-1:A", "TB-1:N"}
    )
    states = step_states(doc, verdict)
    assert states[1].jumpers == (("J1", "TB-1:A", "TB-1:N"),)
    svg = circuit_svg(doc, device="R-1", state=states[1])
    assert "lk-jumper-J1" in _ids(svg)
    assert f"SHORT {reading['a']:.2f} A" in _texts(svg)
    assert "lk-jumper lk-short" in svg


def _node_boxes(svg: str) -> dict[str, str]:
    """The outline of every terminal, CT and input node, by id: where the layout put it."""
    out = {}
    for m in re.finditer(
        r'<g id="(lk-(?:t|ct|input)-[^"]+)" class="node[^"]*">(.*?)</g>', svg, re.S
    ):
        shape = re.search(r'(?:points|d)="([^"]+)"', m.group(2))
        assert shape is not None
        out[m.group(1)] = shape.group(1)
    return out


def test_every_step_of_a_procedure_has_the_same_layout() -> None:
    doc = _panel()
    ops = [
        {"add_jumper": ["TB-1:A", "TB-1:N"], "id": "J1"},
        {"lift": ["CB-1-B:X1", "TB-1:B"]},
        {"land": ["CB-1-B:X1", "TB-1:B"]},
        {"remove_jumper": "J1"},
        {"set": "DC-1", "to": "withdrawn"},
    ]
    verdict = draft_check(doc, ops, ["R-1"])
    svgs = procedure_svgs(doc, verdict, device="R-1")
    assert len(svgs) == len(ops) + 1
    boxes = [_node_boxes(svg) for svg in svgs]
    assert len(boxes[0]) > 20
    for k, b in enumerate(boxes[1:], start=1):
        assert b == boxes[0], f"step {k} moved the drawing"
    # the steps still differ where the state does
    assert "lk-jumper-J1" in _ids(svgs[1]) and "lk-jumper-J1" not in _ids(svgs[4])
    assert "lk-open-CB-1-B" in _ids(svgs[2]) and "lk-open-CB-1-B" not in _ids(svgs[3])


@pytest.mark.parametrize("device", ["R-131", "R-87B"])
def test_dot_lays_it_out_without_a_warning(device: str) -> None:
    """Every fixed-size label cell is large enough for its text (dot warns otherwise)."""
    doc = _quillfen()
    verdict = procedure_check(doc, "P-87B-CB131-OUT" if device == "R-87B" else "P-R131-CASE")
    states = step_states(doc, verdict)
    for st in states:
        dot = circuit_dot(doc, device=device, state=st, layout_states=states)
        run = subprocess.run(["dot", "-Tsvg"], input=dot.encode(), capture_output=True, check=True)
        assert run.stderr.decode() == ""


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_generated_circuits_are_drawn_whole_and_stable(seed: int) -> None:
    """Seeded random wye, delta, summation and mesh circuits (the oracle tests' generators):
    every CT and every device input is drawn, inside its owner's frame, and a second drawing
    of the same record is the same bytes."""
    rng = random.Random(seed)
    for n, make in enumerate((random_wye, random_delta, random_parallel, random_mesh)):
        doc = make(rng, n)
        nl = build_netlist(doc)
        svg = circuit_svg(doc)
        assert svg == circuit_svg(copy.deepcopy(doc))
        ids = _ids(svg)
        assert {f"lk-ct-{c}" for c in nl.cts} <= ids
        assert {f"lk-input-{i.device}-{i.name}" for i in nl.inputs} <= ids
        for i in nl.inputs:
            frame = re.search(rf'id="lk-device-{i.device}".*?<g id="lk-input-', svg, re.S)
            assert frame is not None
        # no node that dot made up for a name it was not given (it would show the bare id)
        assert not re.search(r"<text[^>]*>(in|gnd|ct)_\d+</text>", svg)


def test_record_text_is_escaped_in_the_svg() -> None:
    """The pages put the SVG inline: text from the record must stay text."""
    doc = _panel()
    doc["devices"][0]["functions"] = ["<script>alert(1)</script>", "50&51"]
    doc["devices"][0]["ratio_setting"] = '400:5" onload="x'
    svg = circuit_svg(doc, device="R-1", title="<b>title</b>")
    assert "<script" not in svg and "<b>title" not in svg
    assert "&lt;script&gt;" in svg
    assert 'onload="x' not in svg
