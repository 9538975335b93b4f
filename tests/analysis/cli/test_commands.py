"""The analysis CLI contracts of design.md: ``check_procedure``, ``plan_isolation`` and
``ct_report`` answer the design's JSON (``--json`` prints exactly the API body) for stored sites
and for site files (``--file``), carry the safety cautions, and fail clearly on unknown names.

The expectations are the rules of the trade the demo procedures were written to show (common
practice, no source): isolate trips before shorting CTs; never open a CT pole that has no
shorting jaw on a live circuit."""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError

from analysis.engine.cautions import CAUTIONS
from analysis.sources import EXIT_INPUT, EXIT_UNSAFE
from inventory.services import site_import
from inventory.sitefile.validate import load_site_file
from tests.analysis.engine.test_ratings_report import CASE_KEYS, TOP_KEYS

DEMO = Path(__file__).resolve().parents[3] / "fixtures" / "demo"
QUILLFEN = DEMO / "quillfen.json"

VERDICT_KEYS = {"site", "procedure", "safe", "first_danger", "steps", "cautions"}
FINDING_KEYS = {"code", "severity", "stage", "ct", "device", "input", "circuit", "message"}
PLAN_KEYS = {"site", "device", "possible", "isolate", "restore", "affected", "verdict", "cautions"}
# The CT report's keys are design.md's, kept in one place with the report's own tests.
REPORT_KEYS = set(TOP_KEYS)


def run(*args: str) -> str:
    out = io.StringIO()
    call_command(*args, stdout=out)
    return out.getvalue()


def run_status(*args: str) -> tuple[str, str, int]:
    """(stdout, stderr, exit status) of a command, as the shell would see the status."""
    out, err = io.StringIO(), io.StringIO()
    try:
        call_command(*args, stdout=out, stderr=err)
    except CommandError as exc:
        return out.getvalue(), err.getvalue() + str(exc), exc.returncode
    return out.getvalue(), err.getvalue(), 0


@pytest.fixture
def stored(db):
    site_import(doc=load_site_file(QUILLFEN))
    return "QFN"


def test_unsafe_procedure_verdict_json(stored):
    out, err, status = run_status("check_procedure", stored, "P-R133-OUT-DRAFT", "--json")
    # the whole verdict is printed, then the command exits with the unsafe status
    assert status == EXIT_UNSAFE == 3
    assert "P-R133-OUT-DRAFT is UNSAFE: step 3 (after) open_secondary on CB-133-A" in err
    verdict = json.loads(out)
    assert set(verdict) == VERDICT_KEYS
    assert verdict["safe"] is False
    danger = verdict["first_danger"]
    assert (danger["step"], danger["stage"], danger["code"], danger["ct"]) == (
        3,
        "after",
        "open_secondary",
        "CB-133-A",
    )
    assert verdict["steps"][0]["op"] is None and verdict["steps"][0]["findings"] == []
    # R-133 at its 1200:5 tap: 650 A maximum load / 240 = 2.71 A per phase, 0 A residual
    # (design.md: the state currents; the readings round to 0.01 A)
    assert verdict["steps"][0]["readings"] == [
        {"between": [f"R-133:I{p}1", f"R-133:I{p}2"], "a": 2.71} for p in "ABC"
    ] + [{"between": ["R-133N:IN1", "R-133N:IN2"], "a": 0.0}]
    step3 = verdict["steps"][3]
    assert step3["op"] == {"set": "TS-133/N", "to": "open"}
    dangers = [f for f in step3["findings"] if f["severity"] == "danger"]
    assert {f["ct"] for f in dangers} == {"CB-133-A", "CB-133-B", "CB-133-C"}
    assert all(set(f) == FINDING_KEYS for f in step3["findings"])
    assert all("A secondary" in f["message"] for f in dangers)
    assert verdict["cautions"] == list(CAUTIONS)


def test_safe_procedure_and_text_output(stored):
    verdict = json.loads(run("check_procedure", stored, "P-R132-OUT", "--json"))
    assert verdict["safe"] is True
    assert verdict["first_danger"] is None
    text = run("check_procedure", stored, "P-R132-OUT")
    assert text.startswith("Procedure P-R132-OUT at QFN: SAFE")
    assert "CAUTIONS" in text
    assert "not a switching order" in text


def test_check_procedure_on_a_site_file_matches_the_stored_site(stored):
    from_file = run_status("check_procedure", "--file", str(QUILLFEN), "P-R133-OUT-DRAFT", "--json")
    from_db = run_status("check_procedure", stored, "P-R133-OUT-DRAFT", "--json")
    assert json.loads(from_file[0]) == json.loads(from_db[0])
    assert from_file[2] == from_db[2] == EXIT_UNSAFE


def test_unknown_names_get_the_nearest_codes_and_the_input_status(stored):
    cases = [
        (
            ("check_procedure", stored, "P-R133-OUT-DRAF"),
            "no procedure 'P-R133-OUT-DRAF' at QFN (did you mean 'P-R133-OUT-DRAFT' or "
            "'P-R132-OUT-DRAFT' or 'P-R132-OUT'?)",
        ),
        (("check_procedure", "QFM", "P-1"), "no site 'QFM' (did you mean 'QFN'?)"),
        (
            ("plan_isolation", stored, "R-123"),
            "no device 'R-123' at QFN (did you mean 'R-131' or 'R-132' or 'R-133'?)",
        ),
        (
            ("ct_report", stored, "CB-133-X"),
            "no CT 'CB-133-X' at QFN (did you mean 'CB-133-A' or 'CB-133-B' or 'CB-133-C'?)",
        ),
        (("ct_plot", stored, "CB-133-X"), "no CT 'CB-133-X' at QFN (did you mean 'CB-133-A'"),
        (("findings", "--site", "QNF"), "no site 'QNF' (did you mean 'QFN'?)"),
        (("recompute", "--site", "QFNN"), "no site 'QFNN' (did you mean 'QFN'?)"),
    ]
    for args, message in cases:
        out, err, status = run_status(*args)
        assert (status, out) == (EXIT_INPUT, ""), args
        assert message in err, (args, err)
    # usage errors share the input status (argparse's own, 2)
    assert run_status("check_procedure", stored, "P-1", "P-2", "--file", "x")[2] == EXIT_INPUT
    assert run_status("plan_isolation", stored)[2] == EXIT_INPUT


def test_check_procedure_refuses_a_bad_site_file(tmp_path, db):
    doc = load_site_file(QUILLFEN)
    doc["wires"][0]["length_ft"] = -3
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(doc))
    out, err, status = run_status("check_procedure", "--file", str(bad), "P-R132-OUT")
    assert (out, status) == ("", EXIT_INPUT)
    assert "/wires/0/length_ft: must be greater than 0" in err


def test_plan_isolation_json_isolates_trips_first_and_passes_its_own_check(stored):
    plan = json.loads(run("plan_isolation", stored, "R-132", "--json"))
    assert set(plan) >= PLAN_KEYS
    assert plan["possible"] is True
    assert plan["verdict"]["safe"] is True
    assert plan["cautions"] == list(CAUTIONS)
    assert all(op["why"] and "readings" in op for op in plan["isolate"] + plan["restore"])
    ops = [op["set"] for op in plan["isolate"] if "set" in op]
    trips = [i for i, code in enumerate(ops) if "/T" in code]
    shorts = [i for i, code in enumerate(ops) if "/T" not in code]
    assert trips and shorts and max(trips) < min(shorts)
    # The plan, checked as a procedure of its own, is safe in every transition.
    doc = load_site_file(QUILLFEN)
    doc["procedures"] = [
        {
            "code": "P-PLAN",
            "title": "plan",
            "devices": ["R-132"],
            "steps": plan["isolate"] + plan["restore"],
        }
    ]
    from analysis import engine

    verdict = engine.check_procedure(engine.build_netlist(doc), "P-PLAN").to_json("QFN")
    assert verdict["safe"] is True


def test_plan_text_output(stored):
    text = run("plan_isolation", stored, "R-132")
    assert text.startswith("Isolation plan for R-132 at QFN: possible")
    assert "Isolate:" in text and "Restore:" in text and "CAUTIONS" in text
    assert "why: open R-132's trip TRIP (R-132:OUT1 → CB-132:TC) before any CT circuit is" in text
    assert "note: R-132 is free to remove" in text and "note: verify with a clamp meter" in text


def test_ct_report_json_shape_and_ratio_mismatch(stored):
    report = json.loads(run("ct_report", stored, "CB-133-A", "--json"))
    assert set(report) == REPORT_KEYS
    assert report["tap"] == ["X1", "X5"]
    assert report["ratio"] == "1200:5"
    assert report["turns"] == 240
    assert set(report["cases"]) == {"ground_fault", "phase_fault"}
    for case in report["cases"].values():
        assert set(case) == CASE_KEYS
        assert set(case["burden_ohm"]) == {"r", "x", "z"}
    codes = {(f["code"], f["device"]) for f in report["findings"]}
    assert ("ratio_setting_mismatch", "R-133") in codes


def test_ct_report_for_every_demo_ct(db):
    for path in sorted(DEMO.glob("*.json")):
        doc = load_site_file(path)
        for ct in doc["cts"]:
            report = json.loads(run("ct_report", "--file", str(path), ct["code"], "--json"))
            assert report["ct"] == ct["code"]
            assert report["tap"] == ct["in_use"]


def test_ct_plot_writes_png_files(stored, tmp_path):
    from PIL import Image

    written = run("ct_plot", stored, "CB-133-A", "--out", str(tmp_path)).split()
    assert all(Path(p).parent == tmp_path for p in written)
    assert sorted(Path(p).name for p in written) == [
        "QFN_CB-133-A_burden.png",
        "QFN_CB-133-A_excitation.png",
    ]
    for path in written:
        with Image.open(path) as image:
            assert image.size[0] > 300 and image.size[1] > 200
            darkest, lightest = image.convert("L").getextrema()
            assert lightest - darkest > 100  # not blank
