"""Run ``import_site`` on one file in this fresh process and print what it cost, as JSON:
``{"status", "seconds", "peak_rss_mb", "stderr_bytes", "traceback"}``.

    python tests/hostile/measure.py FILE

The peak resident set (``VmHWM``) includes Django, numpy and the apps (about 100 MB); the
bombs must stay within a few hundred MB of it. No database is touched: every hostile file is
refused before the import opens a transaction.
"""

from __future__ import annotations

import io
import json
import os
import resource
import sys
import time
import traceback
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings.test")


def _peak_kb() -> int:
    """This process's peak resident set in KB: ``VmHWM`` of its address space (new at exec),
    not ``ru_maxrss``, which Linux carries over from the parent (a big test runner) through
    fork and exec."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def main(path: str) -> dict:
    import django

    django.setup()
    from django.core.management import call_command
    from django.core.management.base import CommandError

    err, out = io.StringIO(), io.StringIO()
    start = time.perf_counter()
    status, trace = 0, ""
    try:
        call_command("import_site", path, stdout=out, stderr=err)
    except CommandError as exc:
        status = exc.returncode
        err.write(f"{exc}\n")
    except BaseException:  # what the test is looking for: nothing may escape
        status, trace = 1, traceback.format_exc()
    seconds = time.perf_counter() - start
    peak_kb = _peak_kb()
    return {
        "status": status,
        "seconds": round(seconds, 3),
        "peak_rss_mb": round(peak_kb / 1024, 1),
        "stderr_bytes": len(err.getvalue().encode("utf-8", "replace")),
        "first_line": err.getvalue().splitlines()[0] if err.getvalue() else "",
        "traceback": trace,
    }


if __name__ == "__main__":
    print(json.dumps(main(sys.argv[1])))
