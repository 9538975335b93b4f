"""The command line's contracts beyond the JSON bodies (README, "Command line"): exit statuses
(0 fine, 2 usage or input error, 3 unsafe verdict or impossible plan), ``--file`` checking
every procedure it can, ``--severity S`` meaning S or worse, no job-runner log lines among a
command's output, and ``ct_plot`` writing only inside its output folder.

The verdicts expected of the demo procedures are the rules of the trade the demo README states
(common practice, no source): a neutral pole without a shorting jaw opened first opens every
live CT of the set; a trip left connected while a phase is shorted upstream of a residual
relay gives a false ground trip."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from analysis.compute import compute_site
from analysis.management.commands.ct_plot import safe_name
from analysis.sources import EXIT_INPUT, EXIT_UNSAFE
from inventory.services import site_import
from inventory.sitefile.validate import load_site_file
from tests.analysis.cli.test_commands import QUILLFEN, run, run_status
from tests.analysis.engine.builders import wye_panel

ROOT = Path(__file__).resolve().parents[3]
QFN_PROCEDURES = [
    "P-R131-CASE",
    "P-R132-OUT",
    "P-R132-OUT-DRAFT",
    "P-R133-OUT-DRAFT",
    "P-87B-CB131-OUT",
    "P-87B-CB131-DRAFT",
]
QFN_UNSAFE = {"P-R132-OUT-DRAFT", "P-R133-OUT-DRAFT", "P-87B-CB131-DRAFT"}


def _write(tmp_path: Path, doc: dict, name: str = "site.json") -> str:
    path = tmp_path / name
    path.write_text(json.dumps(doc))
    return str(path)


def _broken_quillfen(tmp_path: Path) -> str:
    """Quillfen with P-R131-CASE lifting a lead that is not there (a typo in a terminal)."""
    doc = load_site_file(QUILLFEN)
    index = next(k for k, p in enumerate(doc["procedures"]) if p["code"] == "P-R131-CASE")
    doc["procedures"][index]["steps"].insert(1, {"lift": ["TB-131:1", "TB-131:9"]})
    return _write(tmp_path, doc)


def test_every_procedure_of_a_site_when_none_is_named(db):
    site_import(doc=load_site_file(QUILLFEN))
    out, err, status = run_status("check_procedure", "QFN", "--json")
    verdicts = json.loads(out)
    assert sorted(v["procedure"] for v in verdicts) == sorted(QFN_PROCEDURES)
    assert {v["procedure"] for v in verdicts if not v["safe"]} == QFN_UNSAFE
    assert status == EXIT_UNSAFE
    for code in QFN_UNSAFE:
        assert f"procedure {code} is UNSAFE" in err
    # safe ones alone exit 0, and the text form lists each verdict
    out, err, status = run_status("check_procedure", "QFN", "P-R131-CASE", "P-R132-OUT")
    assert status == 0 and err == ""
    assert out.count(": SAFE\n") == 2


def test_file_checks_every_procedure_it_can_and_reports_the_others(tmp_path, db):
    path = _broken_quillfen(tmp_path)
    out, err, status = run_status("check_procedure", "--file", path, "--json")
    verdicts = json.loads(out)
    assert [v["procedure"] for v in verdicts] == [c for c in QFN_PROCEDURES if c != "P-R131-CASE"]
    where = next(
        k for k, p in enumerate(load_site_file(path)["procedures"]) if p["code"] == "P-R131-CASE"
    )
    assert (
        f"procedure P-R131-CASE could not be checked:\n  /procedures/{where}/steps/1/lift/1: the "
        "record has no terminal 'TB-131:9'"
    ) in err
    assert status == EXIT_UNSAFE  # three drafts are unsafe; that outranks the input error
    # only safe procedures and the broken one: the input status, the good one still checked
    out, err, status = run_status("check_procedure", "--file", path, "P-R132-OUT", "P-R131-CASE")
    assert status == EXIT_INPUT
    assert out.startswith("Procedure P-R132-OUT at QFN: SAFE")
    assert "1 procedure(s) could not be checked (listed above); 1 checked" in err
    # the broken one named alone is an input error with its pointer
    out, err, status = run_status("check_procedure", "--file", path, "P-R131-CASE")
    assert (out, status) == ("", EXIT_INPUT)
    assert "/steps/1/lift/1: the record has no terminal 'TB-131:9'" in err
    # a plan does not need the procedures: the broken one does not stop it
    out, err, status = run_status("plan_isolation", "--file", path, "R-132", "--json")
    assert status == 0 and json.loads(out)["possible"] is True
    assert err == f"note: {path}: procedure(s) P-R131-CASE left out (they have errors; " + (
        "check_procedure --file lists them)\n"
    )


def test_an_impossible_plan_exits_with_the_unsafe_status(tmp_path, db):
    """No switch on the trip path (wye panel without a test switch): no safe plan exists
    (isolating the trips first is common practice, no source)."""
    path = _write(tmp_path, wye_panel(trip=True).build())
    out, err, status = run_status("plan_isolation", "--file", path, "R-1", "--json")
    plan = json.loads(out)
    assert plan["possible"] is False and status == EXIT_UNSAFE
    assert "no safe isolation plan for R-1: " in err
    assert "no switch is on the path of output TRIP" in err


def test_a_stored_procedure_the_engine_cannot_check_is_a_danger_finding():
    """A procedure stored before a lead was taken out of the record (so the import did not see
    it) lifts a wire that is no longer there: the results must never pass it for safe."""
    b = wye_panel(test_switch=True, trip=True, code="UNC")
    b.procedure(
        "P-OLD", [{"set": "TS-1/T1", "to": "open"}, {"lift": ["TB-1:A", "R-1:IA1"]}], ("R-1",)
    )
    rows = [f for f in compute_site(b.build()).findings if f["procedure"] == "P-OLD"]
    assert [(f["code"], f["severity"]) for f in rows] == [("procedure_unchecked", "danger")]
    assert rows[0]["message"] == (
        "procedure P-OLD could not be checked: step 2 (/procedures/0/steps/1/lift): no wire or "
        "link joins TB-1:A and R-1:IA1; lift names the two ends of a wire or link of this site"
    )


def test_severity_means_that_or_worse(db, eager, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks(execute=True):
        site_import(doc=load_site_file(QUILLFEN))
    every = json.loads(run("findings", "--json"))
    counts = {s: sum(f["severity"] == s for f in every) for s in ("danger", "warning", "caution")}
    assert counts["danger"] and counts["warning"] and counts["caution"]  # the test means something
    rank = ["danger", "warning", "caution", "notice"]
    for severity in rank:
        rows = json.loads(run("findings", "--severity", severity, "--json"))
        allowed = rank[: rank.index(severity) + 1]
        assert rows == [f for f in every if f["severity"] in allowed]
    assert run("findings", "--severity", "warning").endswith(
        f"{counts['danger'] + counts['warning']} finding(s)\n"
    )


def test_ct_plot_writes_under_var_plots_by_default(db, settings, tmp_path):
    site_import(doc=load_site_file(QUILLFEN))
    settings.VAR_DIR = tmp_path / "var"
    written = run("ct_plot", "QFN", "CB-133-A").split()
    assert sorted(written) == [
        str(tmp_path / "var" / "plots" / "QFN_CB-133-A_burden.png"),
        str(tmp_path / "var" / "plots" / "QFN_CB-133-A_excitation.png"),
    ]
    assert all(Path(p).stat().st_size > 1000 for p in written)


def test_ct_plot_never_writes_outside_its_folder_whatever_the_codes(tmp_path, db):
    """Codes are data: a site or CT code with '/', '..' or control characters must not choose
    the folder the plot goes to."""
    hostile_ct = "../../CB-1/A\x1b[2J\n"
    text = json.dumps(wye_panel(code="../..").build()).replace(
        "CB-1-A", json.dumps(hostile_ct)[1:-1]
    )
    doc = json.loads(text)
    out = tmp_path / "out" / "plots"
    from analysis.management.commands import ct_plot

    original = ct_plot.load_document
    ct_plot.load_document = lambda **_: doc
    try:
        written = run("ct_plot", "X", hostile_ct, "--out", str(out)).splitlines()
    finally:
        ct_plot.load_document = original
    # ".." inside one file name is only dots: no "/" is left to climb out with
    assert written and all(Path(p).parent == out for p in written)
    assert sorted(p.name for p in out.iterdir()) == [
        "_..__.._CB-1_A_2J__burden.png",
    ]
    assert sorted(p.name for p in tmp_path.rglob("*") if p.is_file()) == [
        "_..__.._CB-1_A_2J__burden.png"
    ]


@pytest.mark.parametrize(
    ("text", "name"),
    [
        ("QFN", "QFN"),
        ("../etc/passwd", "_etc_passwd"),
        ("a/b\\c", "a_b_c"),
        ("..", "_"),
        ("tab\there\x00", "tab_here_"),
        ("CB-133-A", "CB-133-A"),
    ],
)
def test_safe_name(text, name):
    assert safe_name(text) == name


def _manage(env: dict[str, str], *args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "manage.py", *args],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )


def test_no_job_runner_lines_among_a_commands_output(tmp_path):
    """The embedded setup (SQLite, in-process jobs), as a user runs it: the import runs the
    recompute job inside the command, and nothing but the command's own words is printed."""
    env = {
        k: v
        for k, v in os.environ.items()
        if k not in ("DATABASE_URL", "CELERY_BROKER_URL", "DJANGO_SETTINGS_MODULE")
    }
    env["LOOPKEEP_VAR_DIR"] = str(tmp_path)
    assert _manage(env, "migrate", "-v0").returncode == 0
    done = _manage(env, "import_site", str(QUILLFEN))
    assert done.returncode == 0 and done.stderr == ""
    assert done.stdout.startswith("site QFN: created")
    done = _manage(env, "recompute")
    assert (done.returncode, done.stderr) == (0, "")
    assert done.stdout.startswith("run ") and len(done.stdout.splitlines()) == 1
    done = _manage(env, "findings", "--severity", "danger", "--json")
    assert (done.returncode, done.stderr) == (0, "")
    assert all(f["severity"] == "danger" for f in json.loads(done.stdout))
    done = _manage(env, "check_procedure", "QFN", "P-R133-OUT-DRAFT", "--json")
    assert json.loads(done.stdout)["safe"] is False
    assert done.returncode == EXIT_UNSAFE
    assert done.stderr == (
        "CommandError: procedure P-R133-OUT-DRAFT is UNSAFE: step 3 (after) open_secondary on "
        "CB-133-A\n"
    )
