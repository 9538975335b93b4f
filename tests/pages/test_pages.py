"""The planner pages show what the API answers (the same selectors and actions), for the
invented demo sites of fixtures/demo (their README gives the expected verdicts and plans),
with the safety cautions, and with a number of queries that does not grow with the site."""

from __future__ import annotations

import json
import re
from html import unescape
from urllib.parse import urlencode

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext

from analysis import models as results
from analysis.engine.cautions import cautions
from inventory import models as inv

pytestmark = pytest.mark.django_db


def text(response) -> str:
    """The page's text without tags and with blanks folded, for content checks."""
    html = response.content.decode()
    html = re.sub(r"<(script|style)\b.*?</\1>", " ", html, flags=re.S)
    html = re.sub(r"<svg\b.*?</svg>", " ", html, flags=re.S)
    return " ".join(unescape(re.sub(r"<[^>]+>", " ", html)).split())


def assert_cautions(page: str) -> None:
    for caution in cautions():
        assert " ".join(caution.split()) in page


# ---------------------------------------------------------------------------------------------
# home and site


def test_home_lists_the_sites_with_their_counts(demo_both, viewer):
    page = text(viewer.get("/"))
    assert "QFN Quillfen 115/13.8 kV 27" in page  # 27 CTs (fixtures/demo/README.md)
    assert "ORV Orrinvale 66/11 kV 13" in page
    # findings by severity: the same counts as the stored rows
    for code in ("QFN", "ORV"):
        for severity in ("danger", "warning"):
            n = results.Finding.objects.filter(site_code=code, severity=severity).count()
            assert n > 0
    dangers = results.Finding.objects.filter(site_code="QFN", severity="danger").count()
    assert re.search(rf"QFN Quillfen .*? 6 \(3 unsafe\) {dangers} ", page)
    assert "current (revision" in page


def test_search_by_any_code(demo, viewer):
    exact = viewer.get("/?q=r-132")  # one exact hit (any case): straight to it
    assert exact.status_code == 302 and exact["Location"] == "/sites/QFN/devices/R-132/"
    assert viewer.get("/?q=CB-131-A")["Location"] == "/sites/QFN/cts/CB-131-A/"
    page = text(viewer.get("/?q=TS-132/"))
    for pole in ("TS-132/1", "TS-132/2", "TS-132/3", "TS-132/N", "TS-132/T1", "TS-132/T2"):
        assert f"switch {pole} QFN" in page
    assert "No site, CT, device" in text(viewer.get("/?q=nothing-like-this"))


def test_site_page_shows_buses_procedures_devices_circuits_and_findings(demo, viewer):
    page = text(viewer.get("/sites/QFN/"))
    # B115: 12.0 kA three-phase, 10.0 kA line-to-ground, X/R 12 (fixtures/demo/README.md)
    assert re.search(r"B115 115(\.0)? 12(\.0)? 10(\.0)? 12(\.0)?", page)
    assert re.search(r"P-R133-OUT-DRAFT .*? UNSAFE \(step 3, open_secondary\)", page)
    assert re.search(r"P-R132-OUT Remove R-132 .*? SAFE", page)
    assert "R-87B" in page and "CKT-" in page
    assert "ratio_setting_mismatch" in page  # R-133 says 600:5 on a 1200:5 tap


def test_findings_filter_returns_the_fragment_for_htmx(demo, viewer):
    full = viewer.get("/sites/QFN/?severity=danger")
    rows = re.findall(r'<span class="sev sev-(\w+)"><span aria-hidden', full.content.decode())
    assert rows  # the filtered table has rows, every one a danger (or the legend's)
    fragment = viewer.get(
        "/sites/QFN/?severity=warning&code=saturation_risk",
        HTTP_HX_REQUEST="true",
        HTTP_HX_TARGET="findings",
    )
    html = fragment.content.decode()
    assert html.lstrip().startswith('<section id="findings"')
    assert "<html" not in html
    table = html[html.index("<tbody>") :]
    assert "saturation_risk" in table and "CB-131-A" in table
    assert "ratio_setting_mismatch" not in table


# ---------------------------------------------------------------------------------------------
# CT


def test_ct_page_shows_taps_history_report_and_plots(demo, viewer):
    page = text(viewer.get("/sites/QFN/cts/CB-131-A/"))
    assert "Tap in use: X1–X5 , ratio 1200:5" in page
    assert "X1–X4 (800:5) X1–X5 (1200:5)" in page  # the 2016 re-tap (fixtures/demo/README.md)
    report = results.CTReport.objects.get(site_code="QFN", ct="CB-131-A").report
    index = report["cases"]["ground_fault"]["c37_110_index"]
    assert index > 20  # the demo README: about 28 against a limit of 20
    assert f"◆ {index} (over 20)" in page
    assert f"IEEE {report['knee_point_v']['ieee']} V" in page
    assert "R-131" in page and "M-131" in page  # devices it feeds
    assert "saturation_risk" in page
    html = viewer.get("/sites/QFN/cts/CB-131-A/").content.decode()
    assert "/plot/excitation.svg" in html and "/plot/burden.svg" in html
    svg = viewer.get("/sites/QFN/cts/CB-131-A/plot/excitation.svg")
    assert svg["Content-Type"] == "image/svg+xml" and svg.content.startswith(b"<?xml")


# ---------------------------------------------------------------------------------------------
# procedure


def test_procedure_page_shows_the_api_verdict_first_danger_at_the_top(demo, viewer):
    api = viewer.post("/api/v1/sites/QFN/procedures/P-R133-OUT-DRAFT/check/").json()
    danger = api["first_danger"]
    assert (danger["step"], danger["code"]) == (3, "open_secondary")  # fixtures/demo/README.md
    response = viewer.get("/sites/QFN/procedures/P-R133-OUT-DRAFT/")
    page = text(response)
    top = page.index("DANGER · ✖ UNSAFE")
    assert top < page.index("Cautions") < page.index("step operation")
    step = next(s for s in api["steps"] if s["step"] == 3)
    message = next(f["message"] for f in step["findings"] if f["code"] == "open_secondary")
    assert message in page[top:]
    assert_cautions(page)
    html = response.content.decode()
    # every step has its row and its drawing, and the walk starts at the first danger
    assert 'data-start-step="3"' in html
    assert html.count("data-step-row=") == len(api["steps"])
    assert html.count("data-step-drawing=") == len(api["steps"])
    assert "OPEN SECONDARY" in html  # drawn on the step that opens the CTs


def test_the_procedure_page_draws_its_first_step_and_fetches_the_others(demo, viewer):
    """Only the step the walk opens at (the first danger) is drawn into the page; each other
    step's drawing comes from its own URL, the same bytes as drawing every step at once (one
    layout for the whole walk) and the same record version as the verdict beside it."""
    from analysis import actions
    from analysis.drawing import procedure_svgs

    site = inv.Site.objects.get(code="QFN")
    url = "/sites/QFN/procedures/P-R133-OUT-DRAFT/"
    html = viewer.get(url).content.decode()
    assert html.count("<svg") == 1
    assert re.search(r'data-step-drawing="3">\s*<svg', html)  # the first danger, drawn
    lazy = dict(re.findall(r'data-step-drawing="(\d+)" data-drawing-url="([^"]+)"', html))
    doc, netlist = actions.site_netlist(site.record_version, lambda: None)
    verdict = actions.procedure_check(doc, "P-R133-OUT-DRAFT", netlist=netlist)
    every = procedure_svgs(
        netlist, verdict, devices=("R-133", "R-133N"), highlight=("R-133", "R-133N")
    )
    assert sorted(map(int, lazy)) == [n for n in range(len(every)) if n != 3]
    at = "?" + urlencode({"at": site.record_version})
    for step, link in lazy.items():
        assert unescape(link) == f"{url}steps/{step}/drawing/{at}"
        fetched = viewer.get(unescape(link), HTTP_HX_REQUEST="true")
        assert fetched.status_code == 200 and fetched["Content-Type"].startswith("text/html")
        assert fetched.content.decode() == every[int(step)]
    plain = viewer.get(f"{url}steps/0/drawing/{at}")  # the no-script link: an SVG document
    assert plain["Content-Type"] == "image/svg+xml" and plain.content.decode() == every[0]
    assert "HX-Request" in plain["Vary"]
    assert viewer.get(f"{url}steps/{len(every)}/drawing/{at}").status_code == 404

    # the record changed since the page was loaded: no drawing of another record
    stale = viewer.get(f"{url}steps/0/drawing/?at=1:0:0", HTTP_HX_REQUEST="true")
    assert stale.status_code == 200 and "<svg" not in stale.content.decode()
    assert "reload the page" in stale.content.decode()
    assert viewer.get(f"{url}steps/0/drawing/?at=1:0:0").status_code == 409


def test_step_drawings_need_a_role(demo, no_role, client):
    site = inv.Site.objects.get(code="QFN")
    for link in (
        f"/sites/QFN/procedures/P-R133-OUT-DRAFT/steps/0/drawing/?at={site.record_version}",
        f"/sites/QFN/devices/R-132/plan/steps/1/drawing/?at={site.record_version}",
    ):
        assert client.get(link).status_code == 302  # to the login page
        assert no_role.get(link).status_code == 403


def test_a_safe_procedure_says_so_and_keeps_the_cautions(demo, viewer):
    page = text(viewer.get("/sites/QFN/procedures/P-R132-OUT/"))
    assert "✔ SAFE" in page and "UNSAFE" not in page
    assert_cautions(page)
    assert "1.58 A" in page  # readings after each step


# ---------------------------------------------------------------------------------------------
# builder


def _post(client, url, data):
    return client.post(url, data, HTTP_HX_REQUEST="true", HTTP_HX_TARGET="builder")


def test_builder_checks_each_change_and_the_editor_saves(demo, editor):
    url = "/sites/QFN/builder/"
    base = {"code": "P-R132-TRY", "title": "Try R-132", "devices": ["R-132"]}
    steps: list[str] = []
    for switch in ("TS-132/T1", "TS-132/T2"):
        r = _post(
            editor,
            url,
            {
                **base,
                "step": steps,
                "op": "set",
                "switch": switch,
                "position": "open",
                "action": "add",
            },
        )
        steps = re.findall(r'name="step" value="([^"]+)"', r.content.decode())
        steps = [s.replace("&quot;", '"') for s in steps]
    assert "✔ SAFE" in text(r)
    # the neutral pole has no jaw: opening it first opens the live CT secondaries
    r = _post(
        editor,
        url,
        {
            **base,
            "step": steps,
            "op": "set",
            "switch": "TS-132/N",
            "position": "open",
            "action": "add",
        },
    )
    page = text(r)
    assert "✖ UNSAFE" in page and "open_secondary" in page and "step 3" in page
    assert not inv.Procedure.objects.filter(code="P-R132-TRY").exists()  # nothing stored
    steps = [
        s.replace("&quot;", '"')
        for s in re.findall(r'name="step" value="([^"]+)"', r.content.decode())
    ]
    saved = _post(editor, url, {**base, "step": steps, "action": "save"})
    assert saved.status_code == 204
    assert saved["HX-Redirect"] == "/sites/QFN/procedures/P-R132-TRY/"
    proc = inv.Procedure.objects.get(site__code="QFN", code="P-R132-TRY")
    assert [s.op for s in proc.steps.order_by("order")] == [
        {"set": "TS-132/T1", "to": "open"},
        {"set": "TS-132/T2", "to": "open"},
        {"set": "TS-132/N", "to": "open"},
    ]
    assert proc.devices == ["R-132"] and proc.author == "page-editor"


def test_builder_lists_come_from_the_record_and_refuse_what_it_lacks(demo, editor):
    url = "/sites/QFN/builder/"
    page = editor.post(url, {"op": "set", "switch": "TS-132/1", "action": "refresh"})
    html = page.content.decode()
    assert '<option value="closed"' in html and '<option value="open"' in html
    bad = editor.post(url, {"op": "set", "switch": "TS-999/1", "position": "open", "action": "add"})
    assert "pick a switch" in text(bad)
    tampered = editor.post(
        url, {"step": ['{"set": 1}', json.dumps({"note": "ok"})], "action": "refresh"}
    )
    page = text(tampered)
    assert "step 1 was not understood" in page and "note: ok" in page
    unknown = editor.post(
        url, {"step": [json.dumps({"set": "TS-999/1", "to": "open"})], "action": "refresh"}
    )
    assert "cannot be checked" in text(unknown)


def test_builder_edits_a_stored_procedure_and_reports_service_errors(demo, editor):
    url = "/sites/QFN/procedures/P-R132-OUT/builder/"
    page = editor.get(url).content.decode()
    steps = [s.replace("&quot;", '"') for s in re.findall(r'name="step" value="([^"]+)"', page)]
    proc = inv.Procedure.objects.get(site__code="QFN", code="P-R132-OUT")
    assert len(steps) == proc.steps.count()
    r = editor.post(url, {"code": "ignored", "title": "", "step": steps[:-1], "action": "save"})
    assert r.status_code == 200  # the title is required: the service refuses, nothing changes
    assert "title" in text(r)
    assert proc.steps.count() == len(steps)
    r = editor.post(
        url, {"title": "Shorter", "step": steps[:-1], "devices": ["R-132"], "action": "save"}
    )
    assert r.status_code == 302 and r["Location"] == "/sites/QFN/procedures/P-R132-OUT/"
    assert proc.steps.count() == len(steps) - 1


# ---------------------------------------------------------------------------------------------
# device


def test_device_page_shows_the_plan_with_why_readings_and_collateral(demo, viewer):
    api = viewer.get("/api/v1/sites/QFN/devices/R-132/isolation-plan/").json()
    page = text(viewer.get("/sites/QFN/devices/R-132/"))
    assert "✔ PLAN FOUND" in page
    for op in api["isolate"] + api["restore"]:
        assert " ".join(op["why"].split()) in page
    assert "R-132:IA1–R-132:IA2 1.58 A" in page
    assert "SCADA amps phase B" in page  # XD-132 is collateral (fixtures/demo/README.md)
    assert_cautions(page)


def test_the_device_page_draws_the_plan_s_first_step_and_fetches_the_others(demo, viewer):
    """As on the procedure page: only the step the walk opens at (the normal state of a safe
    plan) is drawn into the page; each other step's drawing comes from its own URL, planned
    again at the same record version, the same bytes as drawing the whole plan at once."""
    from analysis import actions
    from analysis.drawing import procedure_svgs

    site = inv.Site.objects.get(code="QFN")
    html = viewer.get("/sites/QFN/devices/R-132/").content.decode()
    assert html.count("<svg") == 1
    assert re.search(r'data-step-drawing="0">\s*<svg', html)
    lazy = dict(re.findall(r'data-step-drawing="(\d+)" data-drawing-url="([^"]+)"', html))
    doc, netlist = actions.site_netlist(site.record_version, lambda: None)
    plan = actions.isolation_plan(doc, "R-132", netlist=netlist)
    every = procedure_svgs(netlist, plan["verdict"], devices=("R-132",), highlight=("R-132",))
    n_steps = 1 + len(plan["isolate"]) + len(plan["restore"])
    assert len(every) == n_steps and sorted(map(int, lazy)) == list(range(1, n_steps))
    url = "/sites/QFN/devices/R-132/plan/steps/"
    at = "?" + urlencode({"at": site.record_version})
    for step, link in lazy.items():
        assert unescape(link) == f"{url}{step}/drawing/{at}"
        fetched = viewer.get(unescape(link), HTTP_HX_REQUEST="true")
        assert fetched.status_code == 200 and fetched.content.decode() == every[int(step)]
    plain = viewer.get(f"{url}0/drawing/{at}")
    assert plain["Content-Type"] == "image/svg+xml" and plain.content.decode() == every[0]
    assert viewer.get(f"{url}{n_steps}/drawing/{at}").status_code == 404
    stale = viewer.get(f"{url}1/drawing/?at=1:0:0", HTTP_HX_REQUEST="true")
    assert "<svg" not in stale.content.decode() and "reload the page" in stale.content.decode()
    assert viewer.get(f"{url}1/drawing/?at=1:0:0").status_code == 409
    # a device no plan can isolate has no plan drawings to fetch
    assert viewer.get(f"/sites/QFN/devices/86B/plan/steps/0/drawing/{at}").status_code == 404


def test_a_device_no_plan_can_isolate_says_why(demo, viewer):
    page = text(viewer.get("/sites/QFN/devices/86B/"))
    assert "NO SAFE PLAN" in page
    assert "Save as procedure" not in page


def test_the_editor_saves_a_plan_as_a_procedure(demo, editor, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks(execute=True):
        r = editor.post(
            "/sites/QFN/devices/R-132/save-plan/",
            {"code": "P-R132-PLAN", "title": "R-132 from its plan"},
        )
    assert r.status_code == 302 and r["Location"] == "/sites/QFN/procedures/P-R132-PLAN/"
    api = editor.get("/api/v1/sites/QFN/devices/R-132/isolation-plan/").json()
    proc = inv.Procedure.objects.get(site__code="QFN", code="P-R132-PLAN")
    ops = [s.op for s in proc.steps.order_by("order")]
    assert ops == [
        {k: v for k, v in op.items() if k not in ("why", "readings")}
        for op in api["isolate"] + api["restore"]
    ]
    verdict = results.ProcedureVerdict.objects.get(site_code="QFN", procedure="P-R132-PLAN")
    assert verdict.safe
    again = editor.post(
        "/sites/QFN/devices/R-132/save-plan/", {"code": "P-R132-PLAN", "title": "twice"}
    )
    assert again.status_code == 400 and "already exists" in text(again)


# ---------------------------------------------------------------------------------------------
# query counts: constant whatever the size of the site (warm: the site's netlist is cached)

QUERIES = {
    "/": 7,
    "/sites/QFN/": 22,
    "/sites/QFN/?severity=warning&fpage=2": 22,
    "/sites/QFN/cts/CB-131-A/": 10,
    "/sites/QFN/devices/R-132/": 9,
    "/sites/QFN/procedures/P-R132-OUT/": 7,
    "/sites/QFN/builder/": 4,
}


def _count(client, url: str) -> int:
    client.get(url)  # warm the per-thread netlist cache and the session
    with CaptureQueriesContext(connection) as queries:
        assert client.get(url).status_code == 200
    return len(queries)


def test_query_counts_are_pinned_and_do_not_grow_with_the_site(demo, viewer):
    for url, expected in QUERIES.items():
        assert _count(viewer, url) == expected, url
    site = inv.Site.objects.get(code="QFN")
    # more of everything listed (direct rows: only the counts are under test here)
    inv.Procedure.objects.bulk_create(
        inv.Procedure(site=site, code=f"P-EXTRA-{i:02}", title="extra") for i in range(40)
    )
    inv.Device.objects.bulk_create(
        inv.Device(site=site, code=f"XD-EXTRA-{i:02}", kind="transducer") for i in range(40)
    )
    inv.Site.objects.bulk_create(inv.Site(code=f"S{i:02}", name=f"extra {i}") for i in range(30))
    for url in ("/", "/sites/QFN/", "/sites/QFN/?ppage=2&dpage=2"):
        assert _count(viewer, url) == QUERIES.get(url, QUERIES["/sites/QFN/"]), url
