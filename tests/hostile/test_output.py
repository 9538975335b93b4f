"""Issue 11, item 6: text output never carries raw terminal control characters from the record
(a code stored before the bounds, a name): they are shown as ``\\uXXXX``, never obeyed."""

from __future__ import annotations

import io
import json

import pytest
from django.core.management import call_command

from analysis.textout import terminal_safe
from inventory import models
from inventory.services import site_import
from tests.inventory.docs import small_site


@pytest.mark.parametrize(
    ("text", "shown"),
    [
        ("CB-1\x1b[2J", "CB-1\\u001b[2J"),
        ("a\x9bb", "a\\u009bb"),
        ("x\u202ey", "x\\u202ey"),
        ("z\u200bw", "z\\u200bw"),
        ("cr\rlf", "cr\\u000dlf"),
        ("tab\tand\nnewline, ü, Ω", "tab\tand\nnewline, ü, Ω"),
    ],
)
def test_terminal_safe(text, shown):
    assert terminal_safe(text) == shown


@pytest.mark.django_db
@pytest.mark.parametrize("as_json", [False, True])
def test_ct_report_escapes_what_a_legacy_code_holds(as_json):
    site_import(doc=small_site())
    hostile = "CB-1-A\x1b]0;owned\x07\x1b[2J\u202e"
    models.CurrentTransformer.objects.filter(code="CB-1-A").update(code=hostile)
    out = io.StringIO()
    call_command("ct_report", "TST", hostile, *(["--json"] if as_json else []), stdout=out)
    text = out.getvalue()
    assert not any(ch in text for ch in "\x1b\x07\u202e")
    assert "CB-1-A\\u001b]0;owned\\u0007\\u001b[2J\\u202e" in text
    if as_json:
        assert json.loads(text)["ct"] == hostile  # the same string, escaped
