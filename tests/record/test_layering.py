"""The record package is a leaf of ours: no Django, no inventory, no analysis (layers: api →
analysis → inventory → record), so the engine and the apps can all import it."""

from __future__ import annotations

import subprocess
import sys


def test_record_imports_no_django_and_nothing_of_ours():
    code = (
        "import sys, record, record.document, record.model, record.operations\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in "
        "('django', 'rest_framework', 'inventory', 'analysis', 'api', 'config'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.strip()
    assert out == ""
