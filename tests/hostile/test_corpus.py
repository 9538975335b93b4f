"""Issue 11: every file of the hostile corpus (tests/hostile/corpus.py) is refused by
``import_site`` with exit status 2, one clear message naming the JSON pointer (or, for a file
that cannot be read at all, saying why), the error output capped, nothing written, in bounded
time; the bombs in a fresh process within bounded memory and without a traceback."""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError

from inventory import models
from tests.hostile.corpus import CASES, SPECIAL_PATHS, write_corpus

# Generous bounds (the "seconds, a few hundred MB"); measured figures are far below.
SECONDS = 5.0
PEAK_RSS_MB = 300.0
MAX_LINES = 100 + 1  # SITE_FILE_MAX_ERRORS_SHOWN and the count of the rest

pytestmark = pytest.mark.django_db


@pytest.fixture(scope="module")
def corpus(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    return write_corpus(tmp_path_factory.mktemp("hostile"))


def test_the_corpus_holds_at_least_sixty_files(corpus):
    assert len(corpus) + len(SPECIAL_PATHS) >= 60
    assert len({case.name for case in CASES}) == len(CASES)


def _import(path: str) -> tuple[CommandError, list[str], float]:
    err, out = io.StringIO(), io.StringIO()
    start = time.perf_counter()
    with pytest.raises(CommandError) as info:
        call_command("import_site", path, stdout=out, stderr=err)
    return info.value, err.getvalue().splitlines(), time.perf_counter() - start


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_hostile_file_is_refused_with_its_pointer(case, corpus):
    error, lines, seconds = _import(str(corpus[case.name]))
    assert error.returncode == 2
    if case.pointer is not None:
        assert lines, str(error)
        assert lines[0].startswith(f"{case.pointer}: "), lines[:3]
    else:
        assert case.words in str(error), str(error)
    assert len(lines) <= MAX_LINES
    assert not models.Site.objects.exists()
    assert seconds < SECONDS


@pytest.mark.parametrize("name", SPECIAL_PATHS)
def test_a_device_or_folder_is_refused_before_reading(name):
    error, _, seconds = _import(SPECIAL_PATHS[name])
    assert error.returncode == 2
    assert "not a regular file" in str(error)
    assert seconds < SECONDS
    assert not models.Site.objects.exists()


def test_a_named_pipe_is_refused_without_waiting_for_a_writer(tmp_path):
    fifo = tmp_path / "site.json"
    os.mkfifo(fifo)
    error, _, seconds = _import(str(fifo))
    assert error.returncode == 2
    assert "not a regular file" in str(error)
    assert seconds < SECONDS


def test_a_missing_file_is_an_input_error(tmp_path):
    error, _, _ = _import(str(tmp_path / "nope.json"))
    assert error.returncode == 2
    assert "No such file" in str(error)


def test_error_output_is_capped_with_a_count(corpus):
    error, lines, _ = _import(str(corpus["bad-wires-1mb.json"]))
    assert len(lines) == MAX_LINES
    assert lines[-1].startswith("... and ") and lines[-1].endswith("more error(s) not shown")
    assert "error(s); nothing was written" in str(error)


BOMBS = [case for case in CASES if case.bomb]


@pytest.mark.parametrize("case", BOMBS, ids=[c.name for c in BOMBS])
def test_bomb_in_a_fresh_process_is_refused_in_bounded_time_and_memory(case, corpus, tmp_path):
    """Measured in its own process (``ru_maxrss`` of that process alone); the command as a
    user runs it, so a traceback would show here. A clean environment: the embedded settings,
    nothing inherited from other tests."""
    script = Path(__file__).with_name("measure.py")
    env = {
        "PATH": os.environ.get("PATH", "/usr/bin:/bin"),
        "HOME": os.environ.get("HOME", str(tmp_path)),
        "DJANGO_SETTINGS_MODULE": "config.settings.test",
        "LOOPKEEP_VAR_DIR": str(tmp_path),
    }
    done = subprocess.run(
        [sys.executable, str(script), str(corpus[case.name])],
        capture_output=True,
        text=True,
        timeout=120,
        env=env,
        check=False,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    figures = json.loads(done.stdout.strip().splitlines()[-1])
    assert figures["traceback"] == "", figures["traceback"]
    assert figures["status"] == 2, figures
    assert figures["seconds"] < SECONDS
    assert figures["peak_rss_mb"] < PEAK_RSS_MB
    assert figures["stderr_bytes"] < 64 * 1024
