"""Failure isolation in the recompute jobs (issue 11, item 4): a site whose results cannot be
read, computed or written is recorded as a visible failure at its revision (a danger finding
``results_not_computed`` and ``results_status: failed`` in the API), the other sites of its chunk
are written, nothing is left pending unseen, and a finished run never goes back to running.

In-process (the embedded default), so these run on SQLite and on PostgreSQL alike.
"""

from __future__ import annotations

import pytest
from django.db import transaction
from rest_framework.test import APIClient

from analysis import models, selectors, services
from analysis.models import ComputationStatus, RunKind, RunStatus
from analysis.services import results as results_writer
from inventory import models as inv
from inventory.choices import ChangeStatus
from inventory.services import site_import
from tests.inventory.docs import small_site

pytestmark = [pytest.mark.django_db, pytest.mark.usefixtures("eager")]

CODES = ("AAA", "BAD", "CCC")


@pytest.fixture
def three_sites(django_capture_on_commit_callbacks) -> dict[str, inv.Site]:
    """Three small sites with fresh results, then a change to each (revision + 1) waiting."""
    for code in CODES:
        with django_capture_on_commit_callbacks(execute=True):
            site_import(doc=small_site(code))
    with services.recompute_deferred():
        for code in CODES:
            doc = small_site(code)
            doc["site"]["name"] = f"{code} renamed"
            site_import(doc=doc)
    return {s.code: s for s in inv.Site.objects.filter(code__in=CODES)}


def _fleet_run_in_one_chunk(django_capture_on_commit_callbacks, settings) -> models.AnalysisRun:
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 10
    with django_capture_on_commit_callbacks(execute=True):
        run = services.fleet_recompute(force=False)
    run.refresh_from_db()
    return run


def _assert_isolated(sites: dict[str, inv.Site], run: models.AnalysisRun, why: str) -> None:
    for code, site in sites.items():
        site.refresh_from_db()
        status = selectors.site_status(site=code)
        assert status["computed_revision"] == site.revision  # nothing left stale
        assert status["stale"] is False
        assert status["status"] == ("failed" if code == "BAD" else "ok")
    bad = sites["BAD"]
    computation = models.SiteComputation.objects.get(site_id=bad.pk)
    assert computation.status == ComputationStatus.FAILED and why in computation.error
    # The failure is the site's fresh danger finding, first in the findings list.
    dangers = selectors.findings_list(site="BAD", severity="danger")
    assert [(f["code"], f["stale"]) for f in dangers] == [("results_not_computed", False)]
    assert dangers[0]["message"].startswith("results could not be computed: site BAD")
    assert why in dangers[0]["message"]
    # The results stored before stay, labelled stale (their revision is the older one).
    old = selectors.ct_report(site="BAD", ct="CB-1-A")
    assert old is not None and old[1] is True
    for code in ("AAA", "CCC"):
        assert selectors.ct_report(site=code, ct="CB-1-A")[1] is False
        assert not models.Finding.objects.filter(site_code=code, code="results_not_computed")
    # Every change acted on: the failure is the recorded state of that revision.
    assert not inv.SiteChange.objects.exclude(status=ChangeStatus.DONE).exists()
    assert (run.status, run.sites_done, run.sites_failed) == (RunStatus.FAILURE, 3, 1)
    assert run.sites_failed == 1 and "site BAD" in run.error


def test_one_site_whose_write_is_refused_fails_alone(
    three_sites, django_capture_on_commit_callbacks, settings
):
    # A fault current of 1e308 kA is accepted by the column (a float) and gives infinite
    # figures, which JSON (the stored reports and the API) cannot hold: the write is refused.
    inv.Bus.objects.filter(site=three_sites["BAD"]).update(
        three_phase_fault_ka=1e308, ground_fault_ka=1e308
    )
    run = _fleet_run_in_one_chunk(django_capture_on_commit_callbacks, settings)
    _assert_isolated(three_sites, run, "not a finite number")


def test_one_site_the_engine_fails_on_fails_alone(
    three_sites, django_capture_on_commit_callbacks, settings, monkeypatch
):
    from analysis import compute

    real = compute.compute_sites

    def engine(records):
        if any(r.site.code == "BAD" for r in records.values()):
            raise ZeroDivisionError("injected engine failure")
        return real(records)

    monkeypatch.setattr(compute, "compute_sites", engine)
    run = _fleet_run_in_one_chunk(django_capture_on_commit_callbacks, settings)
    _assert_isolated(three_sites, run, "ZeroDivisionError: injected engine failure")


def test_one_site_whose_record_cannot_be_read_fails_alone(
    three_sites, django_capture_on_commit_callbacks, settings, monkeypatch
):
    from analysis import selectors as analysis_selectors

    real = analysis_selectors.site_records
    bad = three_sites["BAD"].pk

    def read(ids):
        if bad in ids:
            raise ValueError("year 0 is out of range")  # what the driver says of such a date
        return real(ids)

    monkeypatch.setattr(analysis_selectors, "site_records", read)
    run = _fleet_run_in_one_chunk(django_capture_on_commit_callbacks, settings)
    _assert_isolated(three_sites, run, "reading: ValueError: year 0 is out of range")


def test_the_failure_shows_in_the_api(three_sites, django_capture_on_commit_callbacks, settings):
    from django.contrib.auth import get_user_model
    from django.contrib.auth.models import Group
    from rest_framework.authtoken.models import Token

    inv.Bus.objects.filter(site=three_sites["BAD"]).update(three_phase_fault_ka=1e308)
    _fleet_run_in_one_chunk(django_capture_on_commit_callbacks, settings)
    user = get_user_model().objects.create_user(username="reader", password="x")
    user.groups.add(Group.objects.get(name="viewer"))
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=user).key}")
    detail = client.get("/api/v1/sites/BAD/").json()
    assert (detail["results_status"], detail["stale"]) == ("failed", False)
    assert "not a finite number" in detail["results_error"]
    body = client.get("/api/v1/sites/").json()
    rows = body["results"] if isinstance(body, dict) else body  # paginated or not
    listed = {s["code"]: s for s in rows}
    assert listed["BAD"]["results_status"] == "failed"
    assert (listed["AAA"]["results_status"], listed["AAA"]["results_error"]) == ("ok", None)
    findings = client.get("/api/v1/findings/?site=BAD&severity=danger").json()["results"]
    assert [f["code"] for f in findings] == ["results_not_computed"]


def test_a_later_good_recompute_clears_the_failure(
    three_sites, django_capture_on_commit_callbacks, settings
):
    bad = three_sites["BAD"]
    inv.Bus.objects.filter(site=bad).update(three_phase_fault_ka=1e308)
    _fleet_run_in_one_chunk(django_capture_on_commit_callbacks, settings)
    assert selectors.site_status(site="BAD")["status"] == "failed"
    with django_capture_on_commit_callbacks(execute=True):
        site_import(doc=small_site("BAD"))  # the record corrected: 12 kA again
    status = selectors.site_status(site="BAD")
    assert (status["status"], status["stale"], status["error"]) == ("ok", False, None)
    assert not models.Finding.objects.filter(site_id=bad.pk, code="results_not_computed")
    assert selectors.ct_report(site="BAD", ct="CB-1-A")[1] is False


def test_writer_refuses_non_finite_numbers_on_every_database(three_sites):
    site = three_sites["AAA"]
    # (site, code, revision, computed at, run, then the table's own columns)
    common = (site.pk, "AAA", 1, "2026-01-01T00:00:00Z", None)
    row = (*common, "CB-1-A", {"index": float("nan")})
    # each in a savepoint, as the writer does (a COPY refused midway aborts the transaction)
    with (
        pytest.raises(ValueError, match=r"ctreport.report holds a number that is not a finite"),
        transaction.atomic(),
    ):
        results_writer._insert(models.CTReport, [row])
    rating = (*common, "CB-1-A", "ground_fault", 0.5, 0.0, 0.5, 12000.0, 100.0, 12.0)
    rating += (float("inf"), 400.0, 0.0, None)
    stored = models.CTRating.objects.count()
    with (
        pytest.raises(ValueError, match=r"ctrating.vx_required_v is inf \(not a finite"),
        transaction.atomic(),
    ):
        results_writer._insert(models.CTRating, [rating])
    assert models.CTRating.objects.count() == stored  # refused before anything is written


# ---------------------------------------------------------------------------------------------
# the run's state machine


def _run(status: str) -> models.AnalysisRun:
    run = services.run_create(kind=RunKind.SITES, site_ids=[])
    models.AnalysisRun.objects.filter(pk=run.pk).update(status=status)
    return run


def test_a_failed_run_never_goes_back_to_running():
    run = _run(RunStatus.FAILURE)
    services.run_started(run_id=run.pk, task_id="another-chunk")
    run.refresh_from_db()
    assert run.status == RunStatus.FAILURE and run.attempts == 1  # the start is counted
    services.run_finish(run_id=run.pk)
    run.refresh_from_db()
    assert run.status == RunStatus.FAILURE


def test_a_succeeded_run_stays_succeeded():
    run = _run(RunStatus.SUCCESS)
    services.run_started(run_id=run.pk, task_id="redelivered")
    services.run_fail(run_id=run.pk, error="late failure")
    run.refresh_from_db()
    assert run.status == RunStatus.SUCCESS and run.error == ""


def test_run_fail_keeps_the_first_finish_and_adds_the_error():
    run = _run(RunStatus.RUNNING)
    services.run_fail(run_id=run.pk, error="first")
    run.refresh_from_db()
    first = run.finished_at
    services.run_fail(run_id=run.pk, error="second")
    run.refresh_from_db()
    assert (run.status, run.error, run.finished_at) == (RunStatus.FAILURE, "first\nsecond\n", first)


@pytest.mark.postgres
def test_binary_copy_stores_every_value_exactly(three_sites):
    """The writer's COPY is binary: each float must come back with the same 64 bits (IEEE 754
    binary64; ``struct.pack(">d")`` gives them), including the extremes of the format (the
    smallest subnormal 5e-324, the largest finite 1.7976931348623157e308, negative zero), and
    a JSON document must come back equal, nested values, null and non-ASCII text included."""
    import datetime as dt
    import struct

    site = three_sites["AAA"]
    at = dt.datetime(2026, 1, 2, 3, 4, 5, 678901, tzinfo=dt.UTC)
    common = (site.pk, "AAA", 2**40, at, 2**50)
    floats = (0.1 + 0.2, 5e-324, 1.7976931348623157e308, -0.0, 1 / 3, -2.5e-10, 12000.0)
    rating = (*common, "CB-9-A", "ground_fault", *floats, None, 7.0, 0.25)
    report = {"ct": "CB-9-A", "x": [0.1 + 0.2, 5e-324, None, True], "µ": "Ω", "n": {"k": 2**53}}
    verdict = (*common, "P-9", False, None, {"safe": False, "steps": [{"ohm": 1 / 3}]})
    models.CTRating.objects.filter(site_id=site.pk).delete()
    results_writer._insert(models.CTRating, [rating])
    results_writer._insert(models.CTReport, [(*common, "CB-9-A", report)])
    results_writer._insert(models.ProcedureVerdict, [verdict])

    got = models.CTRating.objects.get(site_id=site.pk, ct="CB-9-A")
    assert (got.site_code, got.revision, got.computed_at, got.run_id) == common[1:]
    names = ("burden_r_ohm", "burden_x_ohm", "burden_z_ohm", "fault_a", "secondary_fault_a")
    names += ("x_over_r", "vx_required_v")
    bits = [struct.pack(">d", getattr(got, name)) for name in names]
    assert bits == [struct.pack(">d", value) for value in floats]
    assert (got.vx_available_v, got.c37_110_index, got.time_to_saturate_ms) == (None, 7.0, 0.25)
    assert models.CTReport.objects.get(site_id=site.pk, ct="CB-9-A").report == report
    stored = models.ProcedureVerdict.objects.get(site_id=site.pk, procedure="P-9")
    assert (stored.safe, stored.first_danger, stored.verdict) == (False, None, verdict[-1])
