"""The REST API: authentication and roles, the one error shape with "did you mean", the record
and result reads (query counts pinned: they do not grow with the rows), and the answers
computed now, which must be exactly what the command line prints (one way to compute each)."""

from __future__ import annotations

import contextlib
import io
import json
import re

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError
from rest_framework.test import APIClient

from analysis import models as results
from inventory import models as inv
from tests.api.conftest import demo_doc

pytestmark = pytest.mark.django_db

V1 = "/api/v1"


def _cli_json(*args: str) -> dict:
    out = io.StringIO()
    # an unsafe verdict is a CommandError (exit status 3) after the body is printed in full
    with contextlib.suppress(CommandError):
        call_command(*args, "--json", stdout=out)
    return json.loads(out.getvalue())


# ---------------------------------------------------------------------------------------------
# authentication and roles


@pytest.mark.parametrize(
    "url",
    [
        "/sites/",
        "/sites/QFN/",
        "/sites/QFN/cts/",
        "/findings/",
        "/tap-changes/",
        "/sites/QFN/devices/R-131/isolation-plan/",
        "/schema/?format=json",
    ],
)
def test_every_endpoint_needs_a_signed_in_user(demo, url):
    response = APIClient().get(V1 + url)
    assert response.status_code == 401
    body = response.json()
    assert body["status"] == 401 and body["code"] == "not_authenticated"


def test_an_account_without_a_role_is_refused(demo, no_role):
    response = no_role.get(f"{V1}/sites/")
    assert response.status_code == 403
    assert response.json()["code"] == "permission_denied"


def test_viewer_reads_and_checks_but_cannot_import(demo, viewer):
    assert viewer.get(f"{V1}/sites/").status_code == 200
    check = viewer.post(f"{V1}/sites/QFN/procedures/P-R132-OUT/check/")
    assert check.status_code == 200
    doc = demo_doc("quillfen")
    doc["site"]["name"] = "renamed by a viewer"
    before = inv.Site.objects.get(code="QFN").revision
    response = viewer.post(f"{V1}/sites/import/", doc, format="json")
    assert response.status_code == 403
    site = inv.Site.objects.get(code="QFN")
    assert (site.name, site.revision) == ("Quillfen 115/13.8 kV", before)


def test_editor_imports_atomically_with_pointers(demo, editor):
    doc = demo_doc("quillfen")
    doc["site"]["name"] = "Quillfen (renamed)"
    doc["cts"][0]["accuracy"] = "C4000"
    doc["cts"][1]["in_use"] = ["X1", "X9"]
    response = editor.post(f"{V1}/sites/import/", doc, format="json")
    assert response.status_code == 400
    body = response.json()
    assert body["code"] == "invalid"
    pointers = [e["pointer"] for e in body["errors"]]
    assert "/cts/0/accuracy" in pointers and any(p.startswith("/cts/1/in_use") for p in pointers)
    assert inv.Site.objects.get(code="QFN").name == "Quillfen 115/13.8 kV"  # nothing written

    doc = demo_doc("quillfen")
    doc["site"]["name"] = "Quillfen (renamed)"
    dry = editor.post(f"{V1}/sites/import/?dry_run=1", doc, format="json")
    assert dry.status_code == 200 and dry.json()["dry_run"] is True
    assert dry.json()["updated"] == {"sites": 1}
    assert inv.Site.objects.get(code="QFN").name == "Quillfen 115/13.8 kV"
    done = editor.post(f"{V1}/sites/import/", doc, format="json")
    assert done.status_code == 200 and done.json()["updated"] == {"sites": 1}
    assert inv.Site.objects.get(code="QFN").name == "Quillfen (renamed)"


# ---------------------------------------------------------------------------------------------
# errors


def test_unknown_codes_get_the_nearest_ones(demo, viewer):
    response = viewer.get(f"{V1}/sites/QFM/")
    assert response.status_code == 404
    body = response.json()
    assert body["status"] == 404 and body["code"] == "not_found"
    assert body["detail"] == "no site 'QFM'"
    assert body["did_you_mean"][0] == "QFN"

    body = viewer.get(f"{V1}/sites/QFN/cts/CB-131-Q/").json()
    assert body["detail"] == "no CT 'CB-131-Q' at site QFN"
    assert set(body["did_you_mean"][:3]) == {"CB-131-A", "CB-131-B", "CB-131-C"}

    body = viewer.get(f"{V1}/sites/QFN/devices/R-313/isolation-plan/").json()
    assert body["status"] == 404 and "R-131" in body["did_you_mean"]


def test_a_nul_in_a_code_is_a_400_not_a_query(demo, viewer):
    # PostgreSQL refuses NUL in any string: it must never reach a query (it used to be a 500)
    response = viewer.get(f"{V1}/sites/Q%00FN/cts/")
    assert response.status_code == 400
    assert response.json()["errors"] == [
        {"field": "site", "message": "NUL, control characters and lone surrogates are not allowed"}
    ]


def test_draft_steps_that_cannot_be_simulated_are_a_400_naming_the_step(demo, viewer):
    response = viewer.post(
        f"{V1}/sites/QFN/check/",
        {"steps": [{"set": "TS-132/9", "to": "open"}]},
        format="json",
    )
    assert response.status_code == 400
    body = response.json()
    assert body["code"] == "invalid" and body["errors"][0]["field"] == "steps"
    assert "TS-132/9" in body["errors"][0]["message"]

    response = viewer.post(f"{V1}/sites/QFN/check/", {"steps": "open it"}, format="json")
    assert response.status_code == 400
    assert response.json()["errors"][0]["field"] == "steps"


# ---------------------------------------------------------------------------------------------
# the record


def test_ct_list_gives_taps_and_ratios_and_filters(demo, viewer, django_assert_num_queries):
    # auth token, role, site, CTs (one query with the tap annotation), their terminals
    with django_assert_num_queries(5):
        response = viewer.get(f"{V1}/sites/QFN/cts/?page_size=500")
    rows = {r["code"]: r for r in response.json()["results"]}
    assert len(rows) == 27
    cb133 = rows["CB-133-A"]
    # the demo's CB-133 set was re-tapped to the full winding, 1200:5 (fixtures/demo/README)
    assert cb133["ratio"] == "1200:5" and cb133["in_use"] == ["X1", "X5"]
    assert cb133["terminals"]["X5"] == 1200
    ratio = viewer.get(f"{V1}/sites/QFN/cts/?ratio=2000:5&phase=A").json()["results"]
    assert sorted(r["code"] for r in ratio) == ["CB-130-DA", "CB-131-DA", "CB-132-DA", "CB-133-DA"]
    with_class = viewer.get(f"{V1}/sites/QFN/cts/?accuracy=c800&equipment=T1").json()
    assert {r["code"] for r in with_class["results"]} == {"T1-HA", "T1-HB", "T1-HC"}


def test_device_list_with_function_filter(demo, viewer, django_assert_num_queries):
    with django_assert_num_queries(6):  # token, role, site, devices, inputs, outputs
        response = viewer.get(f"{V1}/sites/QFN/devices/?function=87B")
    (device,) = response.json()["results"]
    assert device["code"] == "R-87B" and device["outputs"][0]["target"].startswith("86B:")


def test_procedures_carry_their_stored_verdict(demo, viewer, django_assert_num_queries):
    with django_assert_num_queries(6):  # token, role, site, procedures, steps, verdicts
        rows = viewer.get(f"{V1}/sites/QFN/procedures/").json()["results"]
    stored = dict(results.ProcedureVerdict.objects.values_list("procedure", "safe"))
    assert {r["code"]: r["safe"] for r in rows} == {r["code"]: stored[r["code"]] for r in rows}
    assert all(r["verdict_stale"] is False for r in rows)
    one = viewer.get(f"{V1}/sites/QFN/procedures/P-R132-OUT/").json()
    assert one["verdict"]["procedure"] == "P-R132-OUT" and one["verdict"]["cautions"]


def test_tap_history_across_sites(demo, viewer):
    rows = viewer.get(f"{V1}/tap-changes/?site=QFN&ct=CB-133-A").json()["results"]
    # fixtures/demo/README: CB-133 went 300:5 → 600:5 → 1200:5
    assert [(r["from_ratio"], r["to_ratio"]) for r in rows] == [
        ("300:5", "600:5"),
        ("600:5", "1200:5"),
    ]
    later = viewer.get(f"{V1}/tap-changes/?since=2020-01-01T00:00:00Z").json()["results"]
    assert all(r["changed_at"] >= "2020-01-01" for r in later)


def test_export_is_the_site_file(demo, viewer):
    body = viewer.get(f"{V1}/sites/ORV/export/").json()
    out = io.StringIO()
    call_command("export_site", "ORV", stdout=out)
    assert body == json.loads(out.getvalue())


# ---------------------------------------------------------------------------------------------
# stored results


def test_findings_list_is_one_query_and_filters_severity_or_worse(
    demo, viewer, django_assert_num_queries
):
    with django_assert_num_queries(3):  # token, role, the page of findings with ``stale``
        page = viewer.get(f"{V1}/findings/?page_size=500").json()
    rows = page["results"]
    assert len(rows) == results.Finding.objects.count()
    assert list(rows[0]) == [
        "site",
        "code",
        "severity",
        "ct",
        "device",
        "input",
        "circuit",
        "procedure",
        "step",
        "stage",
        "message",
        "computed_at",
        "stale",
    ]
    warning_or_worse = viewer.get(f"{V1}/findings/?severity=warning&page_size=500").json()
    severities = {r["severity"] for r in warning_or_worse["results"]}
    assert severities <= {"danger", "warning"} and "warning" in severities
    mismatch = viewer.get(f"{V1}/findings/?site=QFN&code=ratio_setting_mismatch").json()
    assert {r["device"] for r in mismatch["results"]} == {"R-133"}


def test_findings_pages_follow_the_cursor(demo, viewer):
    first = viewer.get(f"{V1}/findings/?page_size=5").json()
    second = viewer.get(first["next"]).json()
    assert len(first["results"]) == 5
    assert first["results"][0] != second["results"][0]
    too_big = viewer.get(f"{V1}/findings/?page_size=100000").json()
    assert len(too_big["results"]) <= 500


def test_ct_report_is_served_stored_with_its_revision(demo, viewer):
    body = viewer.get(f"{V1}/sites/QFN/cts/CB-131-A/report/").json()
    site = inv.Site.objects.get(code="QFN")
    assert body["ct"] == "CB-131-A" and body["revision"] == site.revision
    assert body["stale"] is False
    # fixtures/demo/README: the CB-131 set is the only one flagged for saturation (index 28)
    assert any(f["code"] == "saturation_risk" for f in body["findings"])

    site.revision += 1  # an edit not yet recomputed
    site.save(update_fields=["revision"])
    assert viewer.get(f"{V1}/sites/QFN/cts/CB-131-A/report/").json()["stale"] is True
    assert viewer.get(f"{V1}/sites/QFN/").json()["stale"] is True


def test_ct_plots_are_images(demo, viewer):
    png = viewer.get(f"{V1}/sites/QFN/cts/CB-131-A/report/burden.png")
    assert png.status_code == 200 and png["Content-Type"] == "image/png"
    assert png.content[:8] == b"\x89PNG\r\n\x1a\n"
    svg = viewer.get(f"{V1}/sites/QFN/cts/CB-131-A/report/burden.svg")
    assert svg.status_code == 200 and b"<svg" in svg.content
    assert viewer.get(f"{V1}/sites/QFN/cts/CB-131-A/report/other.png").status_code == 404


def test_shared_ct_and_feeding_cts_are_one_query_each(demo, viewer, django_assert_num_queries):
    # token, role, site, the circuit members
    with django_assert_num_queries(4):
        body = viewer.get(f"{V1}/sites/QFN/cts/CB-131-A/circuits/").json()
    (circuit,) = body["circuits"]
    # fixtures/demo/README: R-131 and M-131 in series on the phases, R-131N in the neutral
    assert {"R-131", "M-131", "R-131N"} <= set(circuit["devices"])
    assert {"CB-131-A", "CB-131-B", "CB-131-C"} <= set(circuit["cts"])
    with django_assert_num_queries(4):
        body = viewer.get(f"{V1}/sites/QFN/devices/R-87B/cts/").json()
    # the four breakers' 87B sets are paralleled onto R-87B
    assert len(body["cts"]) == 12 and all(c.endswith(("DA", "DB", "DC")) for c in body["cts"])


# ---------------------------------------------------------------------------------------------
# answers computed now are exactly the command line's


def test_procedure_check_is_the_cli_verdict_with_cautions(demo, viewer):
    body = viewer.post(f"{V1}/sites/QFN/procedures/P-R132-OUT-DRAFT/check/").json()
    assert body == _cli_json("check_procedure", "QFN", "P-R132-OUT-DRAFT")
    assert body["cautions"] and body["procedure"] == "P-R132-OUT-DRAFT"


def test_draft_check_stores_nothing(demo, viewer):
    stored = demo_doc("quillfen")
    steps = next(p for p in stored["procedures"] if p["code"] == "P-R132-OUT")["steps"]
    procedures = inv.Procedure.objects.count()
    body = viewer.post(
        f"{V1}/sites/QFN/check/", {"steps": steps, "devices": ["R-132"]}, format="json"
    ).json()
    stored_verdict = viewer.post(f"{V1}/sites/QFN/procedures/P-R132-OUT/check/").json()
    assert body["procedure"] is None and body["cautions"]
    assert body["steps"] == stored_verdict["steps"] and body["safe"] == stored_verdict["safe"]
    assert inv.Procedure.objects.count() == procedures


def test_isolation_plan_is_the_cli_plan_with_cautions(demo, viewer):
    body = viewer.get(f"{V1}/sites/QFN/devices/R-132/isolation-plan/").json()
    assert body == _cli_json("plan_isolation", "QFN", "R-132")
    assert body["cautions"] and body["device"] == "R-132"


def test_schema_is_valid_and_the_docs_are_served_locally(demo, viewer):
    schema = viewer.get(f"{V1}/schema/?format=json")
    assert schema.status_code == 200
    paths = schema.json()["paths"]
    assert "/api/v1/sites/{site}/procedures/{code}/check/" in paths
    docs = viewer.get(f"{V1}/docs/")
    assert docs.status_code == 200
    # Every script, style sheet and icon comes from our own static files, none from a CDN.
    # (Not a search for "cdn" in the page: the page's random CSRF token can hold those letters.)
    page = docs.content.decode()
    assets = re.findall(r'(?:src|href)="([^"]*)"', page)
    assert assets and all(url.startswith("/static/") for url in assets), assets
    assert not re.search(r"(?:https?:)?//[a-z0-9.-]+\.[a-z]{2,}/", page), page


def test_no_endpoint_falls_back_to_allow_any():
    from api import urls
    from api.permissions import RolePermission

    for pattern in urls.urlpatterns:
        view = pattern.callback.cls
        assert RolePermission in view.permission_classes, pattern.name
    from django.conf import settings

    assert settings.SPECTACULAR_SETTINGS["SERVE_PERMISSIONS"] == ["api.permissions.RolePermission"]


def test_create_user_gives_one_role(db):
    out = io.StringIO()
    call_command("create_user", "planner1", "--role", "editor", stdout=out)
    call_command("create_user", "planner1", "--role", "viewer", stdout=out)
    from django.contrib.auth import get_user_model

    user = get_user_model().objects.get(username="planner1")
    assert list(user.groups.values_list("name", flat=True)) == ["viewer"]
    assert not user.has_usable_password()
    assert out.getvalue().splitlines() == [
        "created user planner1 with role editor",
        "updated user planner1 with role viewer",
    ]


def test_committed_schema_matches_the_code():
    """api/openapi.yaml is the published contract: regenerate it with
    ``python manage.py spectacular --file api/openapi.yaml`` when the API changes."""
    from pathlib import Path

    out = io.StringIO()
    call_command("spectacular", "--validate", "--fail-on-warn", stdout=out)
    committed = (Path(__file__).resolve().parents[2] / "api" / "openapi.yaml").read_text()
    assert out.getvalue().strip() == committed.strip()


# ---------------------------------------------------------------------------------------------
# tap changes and what-ifs


def test_tap_change_records_the_event_and_names_the_mismatched_devices(demo, editor, viewer):
    site = inv.Site.objects.get(code="QFN")
    body = {
        "in_use": ["X2", "X4"],
        "reason": "re-tap for the new feeder load",
        "work_order": "WO-77",
    }
    refused = viewer.post(f"{V1}/sites/QFN/cts/CB-133-A/tap-change/", body, format="json")
    assert refused.status_code == 403

    response = editor.post(f"{V1}/sites/QFN/cts/CB-133-A/tap-change/", body, format="json")
    assert response.status_code == 200, response.json()
    answer = response.json()
    # X2 200 A, X4 800 A on the 1200:5 winding: 600:5 (design.md "Terminal positions")
    assert (answer["from"], answer["to"], answer["ratio"]) == (["X1", "X5"], ["X2", "X4"], "600:5")
    # R-133 says 600:5 and now matches phase A; R-133N says 1200:5 and no longer does
    # (fixtures/demo/README: R-133 was left at 600:5, R-133N updated to 1200:5)
    assert answer["ratio_setting_mismatch"] == ["R-133N"]
    assert answer["changed_by"] == "u-editor" and answer["reason"].startswith("WO-77")
    assert inv.Site.objects.get(code="QFN").revision > site.revision
    history = viewer.get(f"{V1}/tap-changes/?ct=CB-133-A").json()["results"]
    assert history[-1]["to_ratio"] == "600:5"
    # the leads followed the tap: X1's lead (a wire to TB-133) is now on X2 and X5's star-point
    # link on X4, nothing is left on X1 or X5
    exported = viewer.get(f"{V1}/sites/QFN/export/").json()
    ends = {e for w in exported["wires"] for e in (w["from"], w["to"]) if "CB-133-A:" in e}
    ends |= {e for link in exported["links"] for e in link if "CB-133-A:" in e}
    assert ends == {"CB-133-A:X2", "CB-133-A:X4"}
    report = viewer.post(f"{V1}/sites/QFN/cts/CB-133-A/what-if/", {}, format="json").json()
    assert report["ratio"] == "600:5"


def test_tap_change_to_a_terminal_the_ct_lacks_is_a_field_error(demo, editor):
    site = inv.Site.objects.get(code="QFN")
    body = {"in_use": ["X1", "X9"]}
    response = editor.post(f"{V1}/sites/QFN/cts/CB-133-A/tap-change/", body, format="json")
    assert response.status_code == 400
    assert response.json()["errors"][0]["field"] == "in_use"
    assert inv.Site.objects.get(code="QFN").revision == site.revision


def test_what_if_longer_leads_add_their_resistance_and_store_nothing(demo, viewer):
    url = f"{V1}/sites/QFN/cts/CB-132-A/what-if/"
    now = viewer.post(url, {}, format="json").json()
    longer = viewer.post(
        url,
        {"wires": [{"from": "CB-132-A:X1", "to": "TB-132:1", "size": "10AWG", "length_ft": 460}]},
        format="json",
    ).json()
    # 100 ft more of 10 AWG copper at 75 °C: 0.9989 Ω/kft at 20 °C (S13) × (234.5 + 75) /
    # (234.5 + 20) (reference.md) = 1.2149 Ω/kft, so +0.1215 Ω in both fault cases (the phase
    # lead carries the CT's current in the ground-fault and the phase-fault case alike)
    for case in ("ground_fault", "phase_fault"):
        added = longer["cases"][case]["burden_ohm"]["r"] - now["cases"][case]["burden_ohm"]["r"]
        assert added == pytest.approx(0.1215, abs=2e-3)
    assert longer["cautions"] and longer["what_if"]["wires"][0]["length_ft"] == 460
    stored = viewer.get(f"{V1}/sites/QFN/export/").json()
    wire = next(w for w in stored["wires"] if w["from"] == "CB-132-A:X1")
    assert wire["length_ft"] == 360


def test_what_if_another_tap_scales_the_class_voltage(demo, viewer):
    body = viewer.post(
        f"{V1}/sites/QFN/cts/CB-132-A/what-if/", {"in_use": ["X2", "X4"]}, format="json"
    ).json()
    # a 1200:5 C800 used at X2-X4 (600:5) is a C400 (S5, S6 via reference.md)
    assert body["ratio"] == "600:5"
    assert body["accuracy"]["voltage_at_tap_v"] == pytest.approx(400.0)


def test_what_if_that_does_not_apply_says_where(demo, viewer):
    url = f"{V1}/sites/QFN/cts/CB-132-A/what-if/"
    response = viewer.post(
        url,
        {
            "wires": [{"from": "CB-132-A:X1", "to": "TB-999:1", "length_ft": 10}],
            "inputs": [{"device": "R-132", "input": "IZ", "burden_va": 1.0, "pf": 1.0}],
        },
        format="json",
    )
    assert response.status_code == 400
    assert [e["field"] for e in response.json()["errors"]] == ["wires/0", "inputs/0"]
    bad_tap = viewer.post(url, {"in_use": ["X1", "X9"]}, format="json")
    assert bad_tap.status_code == 400
    assert bad_tap.json()["errors"][0]["field"].startswith("cts/")


def test_a_kept_netlist_is_never_used_after_an_edit(demo, viewer, editor):
    url = f"{V1}/sites/QFN/procedures/P-R132-OUT/check/"
    first = viewer.post(url).json()
    assert viewer.post(url).json() == first and first["safe"] is True
    # Re-tap CB-132-A in the record only (the leads stay on X1/X5): the new tap X2-X4 is open,
    # so the same procedure now starts from an open live secondary
    tap = {"in_use": ["X2", "X4"], "move_leads": False, "reason": "record only"}
    changed = editor.post(f"{V1}/sites/QFN/cts/CB-132-A/tap-change/", tap, format="json")
    assert changed.status_code == 200
    after = viewer.post(url).json()
    assert after["safe"] is False
    assert after["first_danger"]["code"] == "open_secondary"
    assert after["first_danger"]["ct"] == "CB-132-A"


def test_circuits_list_and_detail_are_two_queries(demo, viewer, django_assert_num_queries):
    # token, role, site, circuits with ``stale``, members
    with django_assert_num_queries(5):
        body = viewer.get(f"{V1}/sites/QFN/circuits/").json()
    circuits = {c["key"]: c for c in body["circuits"]}
    # fixtures/demo/README: one summing circuit for the four 87B sets, grounded once at TB-87B:4
    (summing,) = [c for c in circuits.values() if "R-87B" in c["devices"]]
    assert len(summing["cts"]) == 12 and summing["ground_points"] == 1
    assert summing["stale"] is False
    one = viewer.get(f"{V1}/sites/QFN/circuits/{summing['key']}/").json()
    assert one["cts"] == summing["cts"] and one["site"] == "QFN"
    missing = viewer.get(f"{V1}/sites/QFN/circuits/CKT-CB-131-Q/").json()
    assert missing["status"] == 404 and missing["did_you_mean"]


# ---------------------------------------------------------------------------------------------
# writes to the record: optimistic concurrency


def test_ct_patch_needs_a_current_etag_and_goes_through_the_rules(demo, editor, viewer):
    url = f"{V1}/sites/QFN/cts/CB-132-A/"
    read = editor.get(url)
    etag = read["ETag"]
    assert viewer.patch(url, {"accuracy": "C400"}, format="json").status_code == 403
    missing = editor.patch(url, {"accuracy": "C400"}, format="json")
    assert missing.status_code == 428 and missing.json()["code"] == "precondition_required"

    bad = editor.patch(url, {"accuracy": "C4000"}, format="json", HTTP_IF_MATCH=etag)
    assert bad.status_code == 400 and bad.json()["errors"][0]["field"] == "accuracy"
    twin = editor.patch(url, {"phase": "B"}, format="json", HTTP_IF_MATCH=etag)
    # CB-132-B is already phase B of the set CB-132-R: one CT per phase in a set
    assert twin.status_code == 400
    assert inv.CurrentTransformer.objects.get(site__code="QFN", code="CB-132-A").phase == "A"

    done = editor.patch(
        url, {"accuracy": "C400", "reason": "nameplate re-read"}, format="json", HTTP_IF_MATCH=etag
    )
    assert done.status_code == 200 and done.json()["accuracy"] == "C400"
    assert done["ETag"] != etag
    stale = editor.patch(url, {"nameplate": "x"}, format="json", HTTP_IF_MATCH=etag)
    assert stale.status_code == 412 and stale.json()["code"] == "precondition_failed"

    retap = editor.patch(
        url, {"in_use": ["X1", "X4"], "reason": "WO-9"}, format="json", HTTP_IF_MATCH=done["ETag"]
    )
    assert retap.status_code == 200 and retap.json()["ratio"] == "800:5"
    history = viewer.get(f"{V1}/tap-changes/?ct=CB-132-A").json()["results"]
    assert history[-1]["to_ratio"] == "800:5" and history[-1]["changed_by"] == "u-editor"


def test_report_and_history_queries_are_pinned(demo, viewer, django_assert_num_queries):
    # token, role, site, the stored report with ``stale``
    with django_assert_num_queries(4):
        assert viewer.get(f"{V1}/sites/QFN/cts/CB-131-A/report/").status_code == 200
    # token, role, the page of changes with CT and site, the CTs' terminals
    with django_assert_num_queries(4):
        rows = viewer.get(f"{V1}/tap-changes/?page_size=500").json()["results"]
    assert len(rows) == inv.TapChange.objects.count() > 1
    url = f"{V1}/sites/QFN/procedures/P-R132-OUT/check/"
    first = viewer.post(url).json()
    # token, role, site, the procedure's code: the verdict of this revision is kept
    with django_assert_num_queries(4):
        assert viewer.post(url).json() == first
