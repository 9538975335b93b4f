"""The record as API resources (issue 10, items 1, 5, 6 and 9): every endpoint for every role
(anonymous 401, a viewer reads and is refused every write with nothing written, an editor
writes), every write through the entity services with If-Match, every error code in the one
shape, and the query count of every list pinned (it does not grow with the rows)."""

from __future__ import annotations

import pytest
from django.core.cache import cache
from rest_framework.test import APIClient
from rest_framework.throttling import SimpleRateThrottle

from inventory import models as inv
from inventory.selectors import site_document
from inventory.services import site_import
from tests.api.conftest import demo_doc
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db

V1 = "/api/v1"
S = f"{V1}/sites/TST"


@pytest.fixture
def tst(db):
    """The small test site (no results computed: these tests are about the record)."""
    site_import(doc=small_site())
    return inv.Site.objects.get(code="TST")


def _id(model, **where) -> int:
    return (
        model.objects.filter(site__code="TST", **where)
        .order_by("id")
        .values_list("id", flat=True)[0]
    )


def _wire_id() -> int:
    return _id(inv.Wire, from_terminal__owner="R-1")


def _link_id() -> int:
    return _id(inv.Link, a__owner="TS-1", b__owner="TB-1")


def _ground_id() -> int:
    return _id(inv.Ground)


def _wire_url() -> str:
    return f"/sites/TST/wires/{_wire_id()}/"


def _link_url() -> str:
    return f"/sites/TST/links/{_link_id()}/"


def _ground_url() -> str:
    return f"/sites/TST/grounds/{_ground_id()}/"


# (method, path, body, editor's status). Paths may name a row id through a callable.
OPERATIONS = [
    ("get", "/sites/", None, 200),
    ("post", "/sites/", {"code": "NEW", "name": "New Yard 13.8 kV"}, 201),
    ("get", "/sites/TST/", None, 200),
    ("patch", "/sites/TST/", {"name": "Test Yard (renamed)"}, 200),
    ("delete", "/sites/TST/", None, 204),
    ("get", "/sites/TST/buses/", None, 200),
    ("post", "/sites/TST/buses/", {"code": "B13", "kv": 13.8}, 201),
    ("get", "/sites/TST/buses/B69/", None, 200),
    ("patch", "/sites/TST/buses/B69/", {"x_over_r": 11}, 200),
    ("delete", "/sites/TST/buses/B69/", None, 409),  # CB-1 is on it
    ("get", "/sites/TST/equipment/", None, 200),
    ("post", "/sites/TST/equipment/", {"code": "CB-2", "kind": "breaker", "bus": "B69"}, 201),
    ("get", "/sites/TST/equipment/CB-1/", None, 200),
    ("patch", "/sites/TST/equipment/CB-1/", {"max_load_a": 400}, 200),
    ("delete", "/sites/TST/equipment/CB-1/", None, 409),  # its CTs
    ("get", "/sites/TST/terminal-blocks/", None, 200),
    ("post", "/sites/TST/terminal-blocks/", {"code": "TB-2"}, 201),
    ("get", "/sites/TST/terminal-blocks/TB-1/", None, 200),
    ("patch", "/sites/TST/terminal-blocks/TB-1/", {"description": "shorting block"}, 200),
    ("delete", "/sites/TST/terminal-blocks/TB-1/", None, 409),  # wired
    ("get", "/sites/TST/cts/", None, 200),
    (
        "post",
        "/sites/TST/cts/",
        {
            "code": "CB-1-N",
            "equipment": "CB-1",
            "phase": "N",
            "secondary_a": 5,
            "terminals": {"X1": 0, "X2": 600},
            "in_use": ["X1", "X2"],
        },
        201,
    ),
    ("get", "/sites/TST/cts/CB-1-A/", None, 200),
    ("patch", "/sites/TST/cts/CB-1-A/", {"nameplate": "re-read"}, 200),
    ("delete", "/sites/TST/cts/CB-1-A/", None, 409),  # wired
    ("get", "/sites/TST/devices/", None, 200),
    ("post", "/sites/TST/devices/", {"code": "M-1", "kind": "meter"}, 201),
    ("get", "/sites/TST/devices/R-1/", None, 200),
    ("patch", "/sites/TST/devices/R-1/", {"ratio_setting": "600:5"}, 200),
    ("delete", "/sites/TST/devices/R-1/", None, 409),  # wired, and named by a procedure
    ("get", "/sites/TST/wires/", None, 200),
    (
        "post",
        "/sites/TST/wires/",
        {"from": "TB-1:7", "to": "TB-1:8", "size": "12AWG", "length_m": 1},
        201,
    ),
    ("get", _wire_url, None, 200),
    ("patch", _wire_url, {"length_ft": 8}, 200),
    ("delete", _wire_url, None, 204),
    ("get", "/sites/TST/links/", None, 200),
    ("post", "/sites/TST/links/", {"between": ["TB-1:7", "TB-1:8"]}, 201),
    ("get", _link_url, None, 200),
    ("patch", _link_url, {"between": ["TS-1:SB", "TB-1:N"]}, 200),
    ("delete", _link_url, None, 204),
    ("get", "/sites/TST/grounds/", None, 200),
    ("post", "/sites/TST/grounds/", {"terminal": "TB-1:9"}, 201),
    ("get", _ground_url, None, 200),
    ("patch", _ground_url, {"terminal": "TB-1:N"}, 200),
    ("delete", _ground_url, None, 204),
    ("get", "/sites/TST/switches/", None, 200),
    (
        "post",
        "/sites/TST/switches/",
        {
            "code": "TS-1/9",
            "kind": "test_switch_pole",
            "transition": "break_before_make",
            "positions": ["closed", "open"],
            "normal": "closed",
            "contacts": [{"between": ["TS-1:9L", "TS-1:9R"], "closed_in": ["closed"]}],
        },
        201,
    ),
    ("get", "/sites/TST/switches/TS-1/1/", None, 200),
    ("patch", "/sites/TST/switches/TS-1/1/", {"transition": "make_before_break"}, 200),
    ("delete", "/sites/TST/switches/TS-1/1/", None, 409),  # a procedure sets it
    ("get", "/sites/TST/procedures/", None, 200),
    (
        "post",
        "/sites/TST/procedures/",
        {"code": "P-NOTE", "title": "A note", "steps": [{"note": "call the control room"}]},
        201,
    ),
    ("get", "/sites/TST/procedures/P-1/", None, 200),
    ("patch", "/sites/TST/procedures/P-1/", {"author": "J. Planner"}, 200),
    ("delete", "/sites/TST/procedures/P-1/", None, 204),
    # writes that are actions rather than resources
    ("post", "/sites/TST/cts/CB-1-A/tap-change/", {"in_use": ["X1", "X5"]}, 200),
    ("post", "/sites/import/", {**small_site(), "site": {"code": "TST", "name": "Re-read"}}, 200),
]

# Reads and answers that store nothing: every role from viewer up gets them, nobody
# anonymous does.
ANSWERS = [
    ("get", "/sites/TST/export/", None),
    ("get", "/sites/TST/circuits/", None),
    ("get", "/sites/TST/cts/CB-1-A/circuits/", None),
    ("get", "/sites/TST/devices/R-1/cts/", None),
    ("get", "/findings/", None),
    ("get", "/tap-changes/", None),
    ("post", "/sites/TST/procedures/P-1/check/", None),
    ("post", "/sites/TST/check/", {"steps": [{"set": "TS-1/T1", "to": "open"}]}),
    ("get", "/sites/TST/devices/R-1/isolation-plan/", None),
    ("post", "/sites/TST/cts/CB-1-A/what-if/", {"in_use": ["X1", "X5"]}),
]


def _url(path) -> str:
    return V1 + (path() if callable(path) else path)


def _send(client: APIClient, method: str, path, body, etag: str | None = None):
    headers = {"HTTP_IF_MATCH": etag} if etag else {}
    return getattr(client, method)(_url(path), body, format="json", **headers)


def _etag(client: APIClient) -> str:
    return client.get(f"{S}/")["ETag"]


def _state() -> tuple:
    """Everything a write could change: every site's revision and file."""
    return tuple(
        (site.code, site.revision, str(site_document(site)))
        for site in inv.Site.objects.order_by("code")
    )


_IDS = [f"{m} {p.__name__ if callable(p) else p}" for m, p, _, _ in OPERATIONS]


@pytest.mark.parametrize(("method", "path", "body", "status"), OPERATIONS, ids=_IDS)
def test_anonymous_is_401(tst, method, path, body, status):
    response = _send(APIClient(), method, path, body, '"x"')
    assert response.status_code == 401
    assert response.json()["code"] == "not_authenticated"


@pytest.mark.parametrize(("method", "path", "body", "status"), OPERATIONS, ids=_IDS)
def test_viewer_reads_and_every_write_is_403_writing_nothing(
    tst, viewer, method, path, body, status
):
    before = _state()
    response = _send(viewer, method, path, body, _etag(viewer))
    if method == "get":
        assert response.status_code == 200
        return
    assert response.status_code == 403
    assert response.json()["code"] == "permission_denied"
    assert _state() == before


@pytest.mark.parametrize(("method", "path", "body", "status"), OPERATIONS, ids=_IDS)
def test_editor_reads_and_writes(tst, editor, method, path, body, status):
    before = _state()
    response = _send(editor, method, path, body, _etag(editor))
    assert response.status_code == status, response.content
    if status == 409:
        assert response.json()["code"] == "conflict" and response.json()["errors"]
        assert _state() == before  # a refused delete writes nothing
    elif method != "get":
        assert _state() != before
        if status != 204 and "/TST/" in _url(path):
            assert response["ETag"] == _etag(editor)


@pytest.mark.parametrize(("method", "path", "body"), ANSWERS, ids=[a[1] for a in ANSWERS])
def test_answers_are_for_every_role_and_store_nothing(tst, viewer, editor, method, path, body):
    assert _send(APIClient(), method, path, body).status_code == 401
    before = _state()
    for client in (viewer, editor):
        response = _send(client, method, path, body)
        assert response.status_code == 200, response.content
    assert _state() == before


# ---------------------------------------------------------------------------------------------
# what the writes do


def test_created_objects_read_back_as_written(tst, editor):
    response = editor.post(
        f"{S}/devices/",
        {
            "code": "M-1",
            "kind": "meter",
            "ratio_setting": "400:5",
            "inputs": [
                {"name": "IA", "from": "M-1:IA1", "to": "M-1:IA2", "rated_a": 5, "burden_va": 0.5}
            ],
        },
        format="json",
    )
    assert response.status_code == 201, response.json()
    assert response.json()["inputs"] == [
        {
            "name": "IA",
            "from": "M-1:IA1",
            "to": "M-1:IA2",
            "rated_a": 5,
            "burden_va": 0.5,
            "pf": 1,  # the service's default power factor of a VA burden
        }
    ]
    assert editor.get(f"{S}/devices/M-1/").json() == response.json()
    switch = editor.get(f"{S}/switches/TS-1/1/").json()
    assert switch["positions"] == ["closed", "open"] and switch["normal"] == "closed"
    assert {"between": ["TS-1:1L", "TS-1:SB"], "closed_in": ["open"]} in switch["contacts"]


def test_procedure_steps_are_replaced_as_a_whole(tst, editor):
    url = f"{S}/procedures/P-1/"
    steps = [{"set": "TS-1/T1", "to": "open"}, {"note": "check the trip is open"}]
    done = editor.patch(url, {"steps": steps}, format="json", HTTP_IF_MATCH=_etag(editor))
    assert done.status_code == 200 and done.json()["steps"] == steps
    assert (
        list(
            inv.ProcedureStep.objects.filter(procedure__code="P-1")
            .order_by("order")
            .values_list("op", flat=True)
        )
        == steps
    )


def test_switch_positions_without_normal_keep_the_normal_one(tst, editor):
    url = f"{S}/switches/TS-1/1/"
    body = {"positions": ["closed", "test", "open"]}
    done = editor.patch(url, body, format="json", HTTP_IF_MATCH=_etag(editor))
    assert done.status_code == 200, done.json()
    assert done.json()["positions"] == ["closed", "test", "open"]
    assert done.json()["normal"] == "closed"


def test_renaming_a_device_carries_its_wiring(tst, editor):
    done = editor.patch(
        f"{S}/devices/R-1/", {"code": "R-1A"}, format="json", HTTP_IF_MATCH=_etag(editor)
    )
    assert done.status_code == 200, done.json()
    assert done.json()["inputs"][0]["from"] == "R-1A:IA1"
    links = editor.get(f"{S}/links/?page_size=500").json()["results"]
    assert any("R-1A:IA1" in link["between"] for link in links)
    assert editor.get(f"{S}/devices/R-1/").status_code == 404


# ---------------------------------------------------------------------------------------------
# every error code, in the one shape


def _shape(body: dict, status: int) -> None:
    assert body["status"] == status
    assert set(body) >= {"status", "code", "detail", "errors"}


def test_400_names_the_field_path_and_writes_nothing(tst, editor):
    before = _state()
    response = editor.post(
        f"{S}/devices/",
        {
            "code": "M-2",
            "kind": "meter",
            "inputs": [{"name": "IA", "from": "M-2:IA1", "to": "nowhere", "rated_a": 5}],
        },
        format="json",
    )
    assert response.status_code == 400
    body = response.json()
    _shape(body, 400)
    assert body["errors"][0]["field"] == "inputs/0/to"
    assert "OWNER:NAME" in body["errors"][0]["message"]
    # a rule of the record: a wire to a terminal whose owner does not exist
    wire = {"from": "TB-1:7", "to": "TB-9:1", "size": "12AWG", "length_m": 1}
    refused = editor.post(f"{S}/wires/", wire, format="json")
    assert refused.status_code == 400
    assert any("TB-9" in e["message"] for e in refused.json()["errors"])
    shape = editor.post(f"{S}/buses/", {"code": "B1", "kv": -5}, format="json")
    assert shape.status_code == 400 and shape.json()["errors"][0]["field"] == "kv"
    unknown = editor.post(
        f"{S}/equipment/", {"code": "CB-3", "kind": "breaker", "bus": "B96"}, format="json"
    )
    assert unknown.status_code == 400 and "B69" in unknown.json()["errors"][0]["message"]
    assert _state() == before


def test_404_says_did_you_mean(tst, viewer):
    response = viewer.get(f"{S}/buses/B96/")
    assert response.status_code == 404
    body = response.json()
    _shape(body, 404)
    assert body["did_you_mean"] == ["B69"]
    assert viewer.get(f"{S}/wires/99999999/").status_code == 404
    assert viewer.get(f"{S}/wires/x/").status_code == 404


def test_405_on_a_method_the_resource_lacks(tst, editor):
    response = editor.put(f"{S}/buses/B69/", {"code": "B69"}, format="json")
    assert response.status_code == 405
    _shape(response.json(), 405)


def test_409_when_the_code_exists(tst, editor):
    response = editor.post(f"{S}/buses/", {"code": "B69"}, format="json")
    assert response.status_code == 409
    _shape(response.json(), 409)
    assert "PATCH" in response.json()["detail"]


def test_409_on_a_delete_still_in_use_names_the_users(tst, editor):
    response = editor.delete(f"{S}/buses/B69/", HTTP_IF_MATCH=_etag(editor))
    assert response.status_code == 409
    assert "CB-1" in response.json()["errors"][0]["message"]


def test_412_on_a_stale_etag_and_428_without_one(tst, editor):
    etag = _etag(editor)
    missing = editor.patch(f"{S}/buses/B69/", {"kv": 66}, format="json")
    assert missing.status_code == 428
    _shape(missing.json(), 428)
    assert editor.delete(f"{S}/grounds/{_ground_id()}/").status_code == 428
    done = editor.patch(f"{S}/buses/B69/", {"kv": 66}, format="json", HTTP_IF_MATCH=etag)
    assert done.status_code == 200 and done["ETag"] != etag
    stale = editor.patch(f"{S}/buses/B69/", {"kv": 69}, format="json", HTTP_IF_MATCH=etag)
    assert stale.status_code == 412
    _shape(stale.json(), 412)
    assert inv.Bus.objects.get(code="B69").kv == 66


def test_413_on_a_body_over_the_limit(tst, editor, settings):
    settings.DATA_UPLOAD_MAX_MEMORY_SIZE = 1000
    before = _state()
    body = {"code": "B13", "kv": 13.8, "pad": "x" * 2000}
    response = editor.post(f"{S}/buses/", body, format="json")
    assert response.status_code == 413
    _shape(response.json(), 413)
    assert response.json()["code"] == "too_large"
    small = editor.post(f"{S}/buses/", {"code": "B13", "kv": 13.8}, format="json")
    assert small.status_code == 201
    assert _state() != before


def test_413_without_a_content_length(tst, editor, settings):
    """A chunked body declares no length: the parser stops reading past the limit."""
    import io

    from api.errors import RequestTooLarge
    from api.parsers import LimitedJSONParser

    settings.DATA_UPLOAD_MAX_MEMORY_SIZE = 10
    with pytest.raises(RequestTooLarge):
        LimitedJSONParser().parse(io.BytesIO(b'{"code": "B13", "kv": 13.8}'), None, {})


def test_415_on_another_content_type(tst, editor):
    response = editor.post(
        f"{S}/buses/", "code=B13", content_type="application/x-www-form-urlencoded"
    )
    assert response.status_code == 415
    _shape(response.json(), 415)
    assert not inv.Bus.objects.filter(code="B13").exists()


def test_429_per_user_with_a_low_rate(tst, viewer, editor, monkeypatch):
    # DRF reads the rates once at import: lower them on the class for this test
    monkeypatch.setattr(SimpleRateThrottle, "THROTTLE_RATES", {"user": "3/min"})
    cache.clear()
    try:
        codes = [viewer.get(f"{S}/buses/").status_code for _ in range(4)]
        assert codes == [200, 200, 200, 429]
        body = viewer.get(f"{S}/buses/").json()
        _shape(body, 429)
        assert body["code"] == "throttled"
        assert editor.get(f"{S}/buses/").status_code == 200  # another user has their own
    finally:
        cache.clear()


def test_every_error_code_is_documented():
    from pathlib import Path

    import yaml

    schema = yaml.safe_load(
        (Path(__file__).resolve().parents[2] / "api" / "openapi.yaml").read_text()
    )
    patch = schema["paths"]["/api/v1/sites/{site}/buses/{code}/"]["patch"]
    assert {"400", "401", "403", "404", "412", "413", "415", "428", "429"} <= set(
        patch["responses"]
    )
    assert any(p["name"] == "If-Match" and p["required"] for p in patch["parameters"])
    post = schema["paths"]["/api/v1/sites/{site}/buses/"]["post"]
    assert {"201", "409", "413", "415"} <= set(post["responses"])


# ---------------------------------------------------------------------------------------------
# query counts: pinned, and the same for a site with many more rows


LISTS = {
    # token, role, site, the rows (one query), then one per prefetched relation
    "buses": 4,
    "equipment": 4,
    "terminal-blocks": 4,
    "cts": 5,
    "devices": 6,
    "wires": 4,
    "links": 4,
    "grounds": 4,
    "switches": 6,
    "procedures": 6,
}


@pytest.mark.parametrize(("plural", "queries"), LISTS.items())
def test_list_queries_do_not_grow_with_rows(
    tst, viewer, plural, queries, django_assert_num_queries
):
    site_import(doc=demo_doc("quillfen"))  # a site with many more of each
    for code in ("TST", "QFN"):
        with django_assert_num_queries(queries):
            response = viewer.get(f"{V1}/sites/{code}/{plural}/?page_size=500")
        assert response.status_code == 200 and response.json()["results"]


def test_site_list_and_detail_are_one_query_each(tst, viewer, django_assert_num_queries):
    site_import(doc=demo_doc("quillfen"))
    with django_assert_num_queries(3):  # token, role, sites with their counts
        assert len(viewer.get(f"{V1}/sites/").json()) == 2
    with django_assert_num_queries(4):  # token, role, site, the site with its counts
        assert viewer.get(f"{V1}/sites/QFN/").json()["code"] == "QFN"


def test_lists_filter_and_order(tst, viewer):
    site_import(doc=demo_doc("quillfen"))
    q = f"{V1}/sites/QFN"
    breakers = viewer.get(f"{q}/equipment/?kind=breaker&bus=B13").json()["results"]
    assert {e["code"] for e in breakers} == {"CB-130", "CB-131", "CB-132", "CB-133"}
    wires = viewer.get(f"{q}/wires/?terminal=CB-131-A:X1").json()["results"]
    assert [(w["from"], w["to"]) for w in wires] == [("CB-131-A:X1", "TB-131:1")]
    poles = viewer.get(f"{q}/switches/?group=TS-131/").json()["results"]
    assert {p["code"] for p in poles} >= {"TS-131/1", "TS-131/T1"}
    assert all(p["code"].startswith("TS-131/") for p in poles)
    down = viewer.get(f"{q}/cts/?ordering=-code&page_size=3").json()["results"]
    codes = [c["code"] for c in down]
    assert codes == sorted(codes, reverse=True)
    page = viewer.get(f"{q}/wires/?page_size=10").json()
    assert len(page["results"]) == 10 and page["next"]
    following = viewer.get(page["next"]).json()["results"]
    assert following[0]["id"] > page["results"][-1]["id"]
