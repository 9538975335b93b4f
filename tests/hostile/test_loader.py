"""Issue 11, item 1: the one loader (``inventory.sitefile.validate.loading``) behind
``import_site``, the commands' ``--file`` and the API's ``sites/import``: keys given twice are
refused with their pointers, the size limit is a setting, and the API refuses what the command
refuses, in the same words."""

from __future__ import annotations

import json

import pytest
from django.test import override_settings
from rest_framework.test import APIClient

from inventory import models
from inventory.sitefile.files import read_site_file
from inventory.sitefile.validate import SiteFileParseError, load_site_text
from tests.api.conftest import _client
from tests.inventory.docs import small_site

V1 = "/api/v1"


def test_every_key_given_twice_is_named_by_its_pointer():
    text = '{"site": {"code": "A", "name": "x", "code": "B"}, "buses": [{"kv": 1, "kv": 2}]}'
    with pytest.raises(SiteFileParseError) as info:
        load_site_text(text, name="dup.json")
    assert [str(e) for e in info.value.errors] == [
        "/site/code: this key is given twice in the same object (which one is meant?)",
        "/buses/0/kv: this key is given twice in the same object (which one is meant?)",
    ]
    assert str(info.value).startswith("dup.json: 2 key(s) given twice:\n/site/code: ")


def test_yaml_keys_given_twice_and_a_key_with_a_slash():
    text = "site:\n  code: A\n  a/b: 1\n  a/b: 2\n"
    with pytest.raises(SiteFileParseError) as info:
        load_site_text(text, name="dup.yaml")
    assert [e.pointer for e in info.value.errors] == ["/site/a~1b"]


def test_a_good_file_loads_as_plain_dicts():
    doc = load_site_text(json.dumps(small_site()), name="ok.json")
    assert doc == small_site()


def test_a_byte_order_mark_is_allowed(tmp_path):
    path = tmp_path / "bom.json"
    path.write_bytes(b"\xef\xbb\xbf" + json.dumps(small_site()).encode())
    assert read_site_file(path)["site"]["code"] == "TST"


def test_the_size_limit_is_a_setting(tmp_path):
    path = tmp_path / "site.json"
    path.write_text(json.dumps(small_site()))
    with (
        override_settings(SITE_FILE_MAX_BYTES=1000),
        pytest.raises(SiteFileParseError, match="larger than the 1,000 bytes"),
    ):
        read_site_file(path)
    with override_settings(SITE_FILE_MAX_BYTES=path.stat().st_size):
        assert read_site_file(path)["site"]["code"] == "TST"


@pytest.fixture
def editor(db) -> APIClient:
    return _client("editor")


def test_the_api_refuses_keys_given_twice_with_their_pointers(editor):
    body = json.dumps(small_site()).replace('"kv": 69', '"kv": 69, "kv": 690', 1)
    response = editor.post(f"{V1}/sites/import/", body, content_type="application/json")
    assert response.status_code == 400
    assert [e["pointer"] for e in response.json()["errors"]] == ["/buses/0/kv"]
    assert not models.Site.objects.exists()


def test_the_api_refuses_a_body_above_the_limit_and_deep_nesting(editor):
    with override_settings(SITE_FILE_MAX_BYTES=1000):
        big = editor.post(
            f"{V1}/sites/import/", json.dumps(small_site()), content_type="application/json"
        )
    assert big.status_code == 413
    deep = '{"format": "loopkeep.site/1", "site": ' + "[" * 5000 + "]" * 5000 + "}"
    response = editor.post(f"{V1}/sites/import/", deep, content_type="application/json")
    assert response.status_code == 400
    assert "nested too deeply" in response.json()["errors"][0]["message"]
    assert not models.Site.objects.exists()


def test_the_api_reads_yaml_and_refuses_its_aliases(editor):
    import yaml

    text = yaml.safe_dump(small_site(), sort_keys=False)
    done = editor.post(f"{V1}/sites/import/?dry_run=1", text, content_type="application/yaml")
    assert done.status_code == 200, done.json()
    bomb = "a: &a [x]\nformat: loopkeep.site/1\nsite: *a\n"
    refused = editor.post(f"{V1}/sites/import/", bomb, content_type="application/yaml")
    assert refused.status_code == 400
    assert "YAML aliases" in refused.json()["errors"][0]["message"]
