"""Issue 11, item 3: recorded history is immutable. A re-import that changes a recorded tap
change (same CT, same time, another from/to/by/reason) is refused with the pointer of what it
changes and writes nothing; the same history again, or a new change after it, is accepted."""

from __future__ import annotations

import io

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError

from inventory import models
from inventory.services import SiteImportError, site_import
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db

RECORDED = {
    "from": ["X1", "X5"],
    "to": ["X1", "X4"],
    "at": "2023-04-18T08:45:00+01:00",
    "by": "A. Clerk",
    "reason": "WO-1",
}


def _site(**change: object) -> dict:
    doc = small_site()
    doc["cts"][0]["tap_changes"] = [{**RECORDED, **change}]
    return doc


def _history() -> list[tuple]:
    return list(
        models.TapChange.objects.order_by("pk").values_list(
            "ct__code", "from_tap", "to_tap", "changed_at", "changed_by", "reason"
        )
    )


@pytest.mark.parametrize(
    ("field", "value", "was"),
    [
        ("reason", "WO-2 (typo fixed)", "'WO-1'"),
        ("by", "B. Other", "'A. Clerk'"),
        ("from", ["X2", "X5"], "[X1, X5]"),
        ("to", ["X1", "X3"], "[X1, X4]"),
    ],
)
def test_a_reimport_that_rewrites_a_recorded_tap_change_is_refused(field, value, was):
    site_import(doc=_site())
    before, revision = _history(), models.Site.objects.get().revision
    with pytest.raises(SiteImportError) as info:
        site_import(doc=_site(**{field: value}))
    assert info.value.errors == [
        f"/cts/0/tap_changes/0/{field}: the tap change recorded at this time has {field} {was}; "
        "recorded history cannot be changed by an import (record a new change instead)"
    ]
    assert _history() == before
    assert models.Site.objects.get().revision == revision


def test_the_command_refuses_it_with_exit_status_2(tmp_path):
    import json

    site_import(doc=_site())
    path = tmp_path / "edited.json"
    path.write_text(json.dumps(_site(reason="edited")))
    err = io.StringIO()
    with pytest.raises(CommandError) as info:
        call_command("import_site", str(path), stderr=err)
    assert info.value.returncode == 2
    assert err.getvalue().startswith("/cts/0/tap_changes/0/reason: ")


def test_the_same_history_again_and_a_new_change_after_it_are_accepted():
    site_import(doc=_site())
    site_import(doc=_site())  # the same instant written in UTC is the same change
    same = _site(at="2023-04-18T07:45:00Z")
    site_import(doc=same)
    assert len(_history()) == 1
    later = _site()
    later["cts"][0]["tap_changes"].append(
        {"from": ["X1", "X4"], "to": ["X1", "X5"], "at": "2024-01-02T03:04:05Z", "reason": "WO-9"}
    )
    later["cts"][0]["in_use"] = ["X1", "X5"]
    site_import(doc=later)
    assert [row[-1] for row in _history()] == ["WO-1", "WO-9"]
