"""Background recompute on the embedded default: no broker, tasks run in-process (eager) once
the edit commits. Runs on SQLite and on PostgreSQL alike.

The on-commit callbacks run for real (``django_capture_on_commit_callbacks(execute=True)``):
nothing is computed before the edit commits, everything is fresh right after.
"""

from __future__ import annotations

import datetime as dt
import io
import json

import pytest
from django.contrib.auth import get_user_model
from django.core.management import call_command
from django.core.management.base import CommandError
from django.db import transaction
from django.utils import timezone

from analysis import models, selectors, services
from analysis.compute import compute_sites
from analysis.models import RunKind, RunStatus
from config.celery import app
from inventory import models as inv
from inventory.choices import ChangeStatus
from inventory.services import SiteImportError, ct_change_tap, site_import
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db


@pytest.fixture(autouse=True)
def _jobs_in_process(eager) -> None:
    """Every test here runs its jobs in-process (tests/conftest.py: ``eager``)."""


def _import(doc: dict, capture) -> inv.Site:
    with capture(execute=True):
        site_import(doc=doc)
    return inv.Site.objects.get(code=doc["site"]["code"])


def _result_sets(site_id: int) -> dict[str, set]:
    """Every stored result row of a site, without ids and times, for exact comparison."""
    drop = {"id", "computed_at", "run_id"}
    out = {}
    for model in services.RESULT_MODELS:
        rows = model.objects.filter(site_id=site_id).values()
        out[model.__name__] = {
            json.dumps({k: v for k, v in row.items() if k not in drop}, sort_keys=True, default=str)
            for row in rows
        }
    return out


def test_import_commits_then_results_are_fresh(django_capture_on_commit_callbacks):
    site = _import(small_site(), django_capture_on_commit_callbacks)
    status = selectors.site_status(site="TST")
    assert status["stale"] is False
    assert status["computed_revision"] == site.revision
    # The wye set of three CTs into one relay (residual input) is one secondary circuit with
    # one ground at TB-1:N: common practice, no source (one ground point per circuit, S20).
    circuits = models.Circuit.objects.filter(site_id=site.pk)
    assert circuits.count() == 1 and circuits.get().ground_points == 1
    assert models.CTRating.objects.filter(site_id=site.pk).count() == 3 * 2  # 3 CTs × 2 cases
    assert models.ProcedureVerdict.objects.filter(site_id=site.pk).count() == 1
    change = inv.SiteChange.objects.get(site_id=site.pk)
    assert change.status == ChangeStatus.DONE
    assert models.AnalysisRun.objects.get(change=change).status == RunStatus.SUCCESS


def test_nothing_is_sent_before_the_edit_commits(django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks(execute=False) as callbacks:
        site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    assert len(callbacks) == 1
    assert inv.SiteChange.objects.get(site_id=site.pk).status == ChangeStatus.PENDING
    assert not models.SiteComputation.objects.filter(site_id=site.pk).exists()
    callbacks[0]()
    assert selectors.site_status(site="TST")["stale"] is False


def test_rolled_back_edit_sends_nothing(django_capture_on_commit_callbacks):
    bad = small_site()
    bad["cts"][0]["in_use"] = ["X1", "X9"]  # not a terminal of the CT
    with (
        django_capture_on_commit_callbacks(execute=True) as callbacks,
        pytest.raises(SiteImportError),
    ):
        site_import(doc=bad)
    assert callbacks == []
    assert not inv.SiteChange.objects.exists()


def _dangers(site: str) -> set[tuple]:
    return {
        (f["code"], f["ct"], f["device"])
        for f in selectors.findings_list(site=site, severity="danger")
    }


def test_tap_change_gives_fresh_report_and_open_secondary(django_capture_on_commit_callbacks):
    site = _import(small_site(), django_capture_on_commit_callbacks)
    ct = inv.CurrentTransformer.objects.get(site=site, code="CB-1-A")
    assert selectors.ct_report(site="TST", ct="CB-1-A")[0]["ratio"] == "400:5"
    assert ("open_secondary", "CB-1-A", None) not in _dangers("TST")
    with django_capture_on_commit_callbacks(execute=True):
        ct_change_tap(ct=ct, to=("X1", "X5"), by="tester", reason="WO-1")
    report, stale = selectors.ct_report(site="TST", ct="CB-1-A")
    # X1-X5 of a 600:5 multi-ratio CT with positions 0/100/150/400/600 is 600:5 (S4).
    assert report["ratio"] == "600:5" and stale is False
    # The leads are still on X1 and X4: nothing joins X5, so the live CT's secondary is open
    # (design.md's open_secondary rule).
    assert ("open_secondary", "CB-1-A", None) in _dangers("TST")
    site.refresh_from_db()
    assert selectors.site_status(site="TST")["computed_revision"] == site.revision


def test_rewired_tap_gives_ratio_setting_mismatch(django_capture_on_commit_callbacks):
    _import(small_site(), django_capture_on_commit_callbacks)
    assert not any(code == "ratio_setting_mismatch" for code, _, _ in _dangers("TST"))
    doc = small_site()
    doc["cts"][0]["in_use"] = ["X1", "X5"]
    for wire in doc["wires"]:
        if wire["from"] == "CB-1-A:X4":
            wire["from"] = "CB-1-A:X5"
    _import(doc, django_capture_on_commit_callbacks)
    # R-1 is set to 400:5 but CB-1-A now feeds it from X1-X5, 600:5 (S4): design.md's
    # ratio_setting_mismatch, and no open secondary since X5 is wired.
    dangers = _dangers("TST")
    assert any(code == "ratio_setting_mismatch" and dev == "R-1" for code, _, dev in dangers)
    assert not any(code == "open_secondary" for code, _, _ in dangers)
    assert selectors.site_status(site="TST")["stale"] is False


def test_results_turn_stale_when_the_revision_moves_on(django_capture_on_commit_callbacks):
    site = _import(small_site(), django_capture_on_commit_callbacks)
    assert all(not f["stale"] for f in selectors.findings_list(site="TST"))
    ct = inv.CurrentTransformer.objects.get(site=site, code="CB-1-B")
    with django_capture_on_commit_callbacks(execute=False) as callbacks:
        ct_change_tap(ct=ct, to=("X1", "X5"))
    findings = selectors.findings_list(site="TST")
    assert findings and all(f["stale"] for f in findings)
    assert selectors.procedure_verdict(site="TST", procedure="P-1")[1] is True
    assert selectors.site_status(site="TST")["stale"] is True
    assert selectors.stale_site_ids() == [site.pk]
    callbacks[0]()
    assert not any(f["stale"] for f in selectors.findings_list(site="TST"))
    assert selectors.procedure_verdict(site="TST", procedure="P-1")[1] is False
    assert selectors.stale_site_ids() == []


def test_admin_edit_recomputes(django_capture_on_commit_callbacks, client):
    site = _import(small_site(), django_capture_on_commit_callbacks)
    before = models.CTRating.objects.get(site_id=site.pk, ct="CB-1-A", case="ground_fault")
    assert before.fault_a == pytest.approx(9500)
    bus = inv.Bus.objects.get(site=site, code="B69")
    user = get_user_model().objects.create_superuser("admin", "admin@example.invalid", "pw")
    client.force_login(user)
    with django_capture_on_commit_callbacks(execute=True):
        response = client.post(
            f"/admin/inventory/bus/{bus.pk}/change/",
            {
                "site": site.pk,
                "code": "B69",
                "kv": "69",
                "three_phase_fault_ka": "12",
                "ground_fault_ka": "19",
                "x_over_r": "10",
            },
        )
    assert response.status_code == 302, response.content[:3000]
    site.refresh_from_db()
    after = models.CTRating.objects.get(site_id=site.pk, ct="CB-1-A", case="ground_fault")
    assert after.revision == site.revision > before.revision
    # The ground-fault case uses the bus's single-line-to-ground current (design.md), and the
    # secondary current is the primary current over the 400:5 ratio of X1-X4 (S4).
    assert after.fault_a == pytest.approx(19000)
    assert after.secondary_fault_a == pytest.approx(19000 * 5 / 400)


def test_recompute_twice_gives_the_same_rows_and_counts_once(django_capture_on_commit_callbacks):
    with services.recompute_deferred():
        site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    run = services.run_create(kind=RunKind.SITES, site_ids=[site.pk], force=True)
    first = services.chunk_recompute(run_id=run.pk, index=0, site_ids=[site.pk], force=True)
    rows = _result_sets(site.pk)
    again = services.chunk_recompute(run_id=run.pk, index=0, site_ids=[site.pk], force=True)
    assert first.counted and not again.counted
    assert again.done_before  # the chunk was written: the second delivery did nothing
    assert _result_sets(site.pk) == rows
    run.refresh_from_db()
    assert run.sites_done == 1
    assert run.cts == 3
    # The rows are what the engine returns for the stored document, no more, no less.
    doc_results = compute_sites({site.pk: small_site()})[site.pk]
    assert len(rows["Finding"]) == len(doc_results.findings)
    assert len(rows["CTRating"]) == len(doc_results.ct_cases)


def test_stored_rows_hold_the_engines_values_column_by_column():
    """The writer builds its rows as tuples in column order: each value lands in its column."""
    with services.recompute_deferred():
        site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    services.chunk_recompute(run_id=None, index=0, site_ids=[site.pk], force=True)
    engine = compute_sites({site.pk: small_site()})[site.pk]
    cases = list(
        models.CTRating.objects.filter(site_id=site.pk).order_by("id").values(*engine.ct_cases[0])
    )
    assert cases == engine.ct_cases
    names = ("code", "severity", "ct", "device", "input", "circuit", "procedure", "step", "stage")
    stored = models.Finding.objects.filter(site_id=site.pk).order_by("id")
    assert [(*(getattr(f, n) for n in names), f.message, f.numbers) for f in stored] == [
        (*(f.get(n) for n in names), f["message"], f["numbers"]) for f in engine.findings
    ]
    verdicts = models.ProcedureVerdict.objects.filter(site_id=site.pk).order_by("id")
    assert [(v.procedure, v.safe, v.first_danger, v.verdict) for v in verdicts] == [
        (v["procedure"], v["safe"], v["first_danger"], v["verdict"]) for v in engine.verdicts
    ]
    computation = models.SiteComputation.objects.get(site_id=site.pk)
    assert (computation.status, computation.error) == ("ok", "")
    assert computation.revision == site.revision
    assert (computation.cts, computation.findings, computation.circuits) == (
        len(engine.ct_reports),
        len(engine.findings),
        len(engine.circuits),
    )
    assert computation.dangers == sum(f["severity"] == "danger" for f in engine.findings)


def test_unchanged_site_is_skipped_without_force(django_capture_on_commit_callbacks):
    site = _import(small_site(), django_capture_on_commit_callbacks)
    computed_at = models.SiteComputation.objects.get(site_id=site.pk).computed_at
    out = services.chunk_recompute(run_id=None, index=0, site_ids=[site.pk], force=False)
    assert out.skipped == [site.pk] and out.written == []
    assert models.SiteComputation.objects.get(site_id=site.pk).computed_at == computed_at


def test_sweep_sends_a_lost_request_once_per_site(django_capture_on_commit_callbacks):
    # Three edits whose sends were lost (callbacks dropped, as when the broker is down).
    with django_capture_on_commit_callbacks(execute=False):
        site_import(doc=small_site())
        site = inv.Site.objects.get(code="TST")
        for tap in (("X1", "X5"), ("X1", "X3")):
            ct_change_tap(ct=inv.CurrentTransformer.objects.get(site=site, code="CB-1-A"), to=tap)
    assert inv.SiteChange.objects.filter(status=ChangeStatus.PENDING).count() == 3
    assert services.requests_sweep() == 0  # younger than a minute: not due yet
    inv.SiteChange.objects.update(created_at=timezone.now() - dt.timedelta(minutes=2))
    assert services.requests_sweep() == 1
    assert not inv.SiteChange.objects.exclude(status=ChangeStatus.DONE).exists()
    site.refresh_from_db()
    assert selectors.site_status(site="TST")["computed_revision"] == site.revision
    assert selectors.ct_report(site="TST", ct="CB-1-A")[0]["ratio"] == "150:5"  # X1-X3 (S4)


def test_failing_site_does_not_break_the_edit(django_capture_on_commit_callbacks, monkeypatch):
    def broken(docs):
        raise ZeroDivisionError("injected engine failure")

    monkeypatch.setattr("analysis.compute.compute_sites", broken)
    site = _import(small_site(), django_capture_on_commit_callbacks)  # must not raise
    change = inv.SiteChange.objects.get(site_id=site.pk)
    # Acted on: the failure is the recorded state of that revision (not stale with nothing
    # pending); the next edit or a forced run tries again.
    assert change.status == ChangeStatus.DONE
    run = models.AnalysisRun.objects.get(change=change)
    assert run.status == RunStatus.FAILURE
    assert "injected engine failure" in run.error
    status = selectors.site_status(site="TST")
    assert (status["stale"], status["status"]) == (False, "failed")
    assert [f["code"] for f in selectors.findings_list(site="TST")] == ["results_not_computed"]


def test_fleet_run_in_chunks(django_capture_on_commit_callbacks, settings):
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 2
    with services.recompute_deferred():
        for code in ("AAA", "BBB", "CCC"):
            site_import(doc=small_site(code))
    assert inv.SiteChange.objects.filter(status=ChangeStatus.PENDING).count() == 3
    with django_capture_on_commit_callbacks(execute=True):
        run = services.fleet_recompute()
    run.refresh_from_db()
    assert (run.status, run.sites_done, run.sites_total) == (RunStatus.SUCCESS, 3, 3)
    assert run.chunks.count() == 2
    assert run.cts == 9
    assert not inv.SiteChange.objects.exclude(status=ChangeStatus.DONE).exists()
    assert models.SiteComputation.objects.count() == 3


def test_chunk_read_takes_a_constant_number_of_queries(
    django_capture_on_commit_callbacks, django_assert_num_queries
):
    with services.recompute_deferred():
        for code in ("AAA", "BBB", "CCC"):
            site_import(doc=small_site(code))
    ids = list(inv.Site.objects.order_by("pk").values_list("pk", flat=True))
    # 1 query for the sites and their computed revisions, then site_documents: 18, one per
    # record table (sites, terminals, buses, ..., procedure steps).
    with django_assert_num_queries(19):
        heads, docs = selectors.chunk_inputs(ids[:1])
    assert len(docs) == 1
    with django_assert_num_queries(19):
        heads, docs = selectors.chunk_inputs(ids)
    assert len(docs) == 3 and sorted(heads) == ids


def test_findings_selector_is_one_query(
    django_capture_on_commit_callbacks, django_assert_num_queries
):
    for code in ("AAA", "BBB"):
        _import(small_site(code), django_capture_on_commit_callbacks)
    with django_assert_num_queries(1):
        rows = selectors.findings_list()
    assert rows and {r["site"] for r in rows} == {"AAA", "BBB"}
    assert all(list(r) == list(selectors.FINDING_FIELDS) for r in rows)


def test_circuit_members_of_a_ct_in_one_query(
    django_capture_on_commit_callbacks, django_assert_num_queries
):
    site = _import(small_site(), django_capture_on_commit_callbacks)
    with django_assert_num_queries(1):
        members = {
            (m.kind, m.code) for m in selectors.circuits_sharing_ct(site_id=site.pk, ct="CB-1-A")
        }
    # The three CTs of the wye set share the neutral, so one circuit holds all three and R-1.
    assert members == {("ct", "CB-1-A"), ("ct", "CB-1-B"), ("ct", "CB-1-C"), ("device", "R-1")}


def test_findings_command_json_and_text(django_capture_on_commit_callbacks):
    _import(small_site(), django_capture_on_commit_callbacks)
    out = io.StringIO()
    call_command("findings", "--site", "TST", "--json", stdout=out)
    body = json.loads(out.getvalue())
    assert body == selectors.findings_list(site="TST")
    out = io.StringIO()
    call_command("findings", "--severity", "danger", stdout=out)
    assert f"{len(selectors.findings_list(severity='danger'))} finding(s)" in out.getvalue()
    with pytest.raises(CommandError, match="no site 'NOPE'"):
        call_command("findings", "--site", "NOPE")


def test_recompute_command_in_process(django_capture_on_commit_callbacks):
    with services.recompute_deferred():
        site_import(doc=small_site())
    out = io.StringIO()
    call_command("recompute", "--site", "TST", stdout=out)
    assert "success" in out.getvalue() and "1/1 sites" in out.getvalue()
    assert selectors.site_status(site="TST")["stale"] is False
    with pytest.raises(CommandError, match="no site .NOPE. \\(there are 1: TST\\)"):
        call_command("recompute", "--site", "NOPE")


def test_request_inside_outer_transaction_waits_for_the_outer_commit(
    django_capture_on_commit_callbacks,
):
    with django_capture_on_commit_callbacks(execute=True), transaction.atomic():
        site_import(doc=small_site())
        site = inv.Site.objects.get(code="TST")
        assert not models.SiteComputation.objects.filter(site_id=site.pk).exists()
    assert selectors.site_status(site="TST")["stale"] is False


def test_sweep_gives_up_after_the_bound(django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks(execute=False):
        site_import(doc=small_site())
    inv.SiteChange.objects.update(sends=5, created_at=timezone.now() - dt.timedelta(minutes=10))
    assert services.requests_sweep(max_sends=5) == 0
    assert inv.SiteChange.objects.get().status == ChangeStatus.FAILED


def test_beat_schedule_names_registered_tasks(settings):
    import analysis.tasks  # noqa: F401  (registers the tasks)
    import inventory.tasks  # noqa: F401

    names = {entry["task"] for entry in settings.CELERY_BEAT_SCHEDULE.values()}
    assert names == {
        "analysis.sweep_requests",
        "analysis.recompute_fleet",
        "analysis.prune_results",
        "inventory.sweep_import_jobs",
        "inventory.prune_import_jobs",
    }
    assert names <= set(app.tasks)
    sweep = next(e for e in settings.CELERY_BEAT_SCHEDULE.values() if "sweep" in e["task"])
    # Swept every few seconds, so an edit made while the broker was away is computed seconds
    # after its return, and a chunk whose worker died is sent again within about a minute.
    assert sweep["schedule"] == settings.LOOPKEEP_SWEEP_EVERY_S <= 15
    assert sweep["options"]["expires"] == sweep["schedule"]
    assert settings.LOOPKEEP_CHUNK_HEARTBEAT_S * 3 <= settings.LOOPKEEP_CHUNK_STALL_S <= 60
    # The broker gives an unacknowledged message back only after the longest task.
    visibility = settings.CELERY_BROKER_TRANSPORT_OPTIONS["visibility_timeout"]
    assert visibility > settings.CELERY_TASK_TIME_LIMIT


def test_nightly_task_recomputes_every_site(django_capture_on_commit_callbacks):
    from analysis.tasks import recompute_fleet

    with services.recompute_deferred():
        for code in ("AAA", "BBB"):
            site_import(doc=small_site(code))
    with django_capture_on_commit_callbacks(execute=True):
        run_id = recompute_fleet.delay().get()
    run = models.AnalysisRun.objects.get(pk=run_id)
    assert (run.kind, run.status, run.sites_done) == (RunKind.FLEET, RunStatus.SUCCESS, 2)
    assert selectors.stale_site_ids() == []


def test_stalled_run_gets_its_lost_chunk_sent_again(django_capture_on_commit_callbacks, settings):
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 1
    with services.recompute_deferred():
        for code in ("AAA", "BBB", "CCC"):
            site_import(doc=small_site(code))
    run = services.run_create(kind=RunKind.FLEET, force=True)
    services.run_started(run_id=run.pk, task_id="lost-chunk-test")
    chunks = services.run_plan(run_id=run.pk)
    assert len(chunks) == 3
    for index in (0, 2):  # the message of chunk 1 never reached a worker
        services.chunk_recompute(run_id=run.pk, index=index, site_ids=chunks[index], force=True)
    run.refresh_from_db()
    assert (run.status, run.sites_done) == (RunStatus.RUNNING, 2)
    assert services.runs_sweep(lost_s=600) == 0  # not stalled yet
    # No sign of life in the run for 11 minutes (its written chunks are that old too).
    eleven_ago = timezone.now() - dt.timedelta(minutes=11)
    models.AnalysisRun.objects.filter(pk=run.pk).update(progress_at=eleven_ago)
    run.chunks.update(heartbeat_at=eleven_ago, done_at=eleven_ago)
    assert services.runs_sweep(lost_s=600) == 1
    run.refresh_from_db()
    assert (run.status, run.sites_done, run.chunks.count()) == (RunStatus.SUCCESS, 3, 3)
    assert selectors.stale_site_ids() == []


def test_fleet_chunks_are_sized_by_cts_and_kept_as_planned(settings):
    # Bookkeeping of this project (a chunk holds at most CHUNK_CTS CTs and CHUNK_SITES sites;
    # a larger site goes alone), no outside source.
    with services.recompute_deferred():
        for code in ("AAA", "BBB", "CCC"):
            site_import(doc=small_site(code))
    ids = list(inv.Site.objects.order_by("pk").values_list("pk", flat=True))
    per_site = inv.CurrentTransformer.objects.filter(site_id=ids[0]).count()
    assert per_site > 1
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 10
    settings.LOOPKEEP_RECOMPUTE_CHUNK_CTS = 2 * per_site  # two sites fit, the third does not
    run = services.run_create(kind=RunKind.FLEET, force=True)
    services.run_started(run_id=run.pk, task_id="sized")
    assert services.run_plan(run_id=run.pk) == [ids[:2], ids[2:]]
    # Planned once: a redelivered run splits the same way whatever the settings are now.
    settings.LOOPKEEP_RECOMPUTE_CHUNK_CTS = per_site
    assert services.run_plan(run_id=run.pk) == [ids[:2], ids[2:]]
    # A site with more CTs than a chunk may hold goes alone; the site bound holds too.
    assert services.fleet_chunks(ids) == [[i] for i in ids]
    settings.LOOPKEEP_RECOMPUTE_CHUNK_CTS = per_site - 1
    assert services.fleet_chunks(ids) == [[i] for i in ids]
    settings.LOOPKEEP_RECOMPUTE_CHUNK_CTS = 100 * per_site
    settings.LOOPKEEP_RECOMPUTE_CHUNK_SITES = 2
    assert services.fleet_chunks(ids) == [ids[:2], ids[2:]]
    # The chunks run as planned: every site written once, the run closes.
    for index, chunk in enumerate([ids[:2], ids[2:]]):
        services.chunk_recompute(run_id=run.pk, index=index, site_ids=chunk, force=True)
    services.run_finish(run_id=run.pk)  # as each chunk task does once it succeeded
    run.refresh_from_db()
    assert (run.status, run.sites_done, run.chunks.count()) == (RunStatus.SUCCESS, 3, 2)
    assert selectors.stale_site_ids() == []


def test_a_run_planned_before_chunks_were_sized_by_cts_keeps_its_split():
    run = models.AnalysisRun(site_ids=[5, 6, 7, 8, 9], chunk_size=2, chunk_starts=None)
    assert services.run_chunks(run) == [[5, 6], [7, 8], [9]]
    run.chunk_starts = [0, 3]
    assert services.run_chunks(run) == [[5, 6, 7], [8, 9]]


def test_run_whose_message_was_lost_is_sent_again(django_capture_on_commit_callbacks):
    with services.recompute_deferred():
        site_import(doc=small_site())
    site = inv.Site.objects.get(code="TST")
    run = services.run_create(kind=RunKind.SITES, site_ids=[site.pk], force=True)
    models.AnalysisRun.objects.filter(pk=run.pk).update(
        created_at=timezone.now() - dt.timedelta(minutes=11)
    )
    assert services.runs_sweep(lost_s=600) == 1
    run.refresh_from_db()
    assert run.status == RunStatus.SUCCESS
    assert selectors.site_status(site="TST")["stale"] is False
