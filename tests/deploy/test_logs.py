"""Structured logs (config/logs.py, config/middleware.py, the Celery signals of config/celery.py):
one JSON object per line with the request id, user and site of a request, and the task and run
id of a task. JSON lines: RFC 8259 objects, one per line (the JSON Lines convention)."""

from __future__ import annotations

import io
import json
import logging
from collections.abc import Iterator

import pytest
from celery import signals
from pythonjsonlogger.json import JsonFormatter

from analysis.tasks import recompute_chunk
from config.logs import ContextFilter, logging_config
from inventory.services import site_import
from tests.inventory.docs import small_site


@pytest.fixture
def json_lines() -> Iterator[io.StringIO]:
    """The JSON handler of ``LOG_FORMAT=json`` on the root logger, written to a buffer."""
    config = logging_config(fmt="json", level="INFO")["formatters"]["json"]
    buffer = io.StringIO()
    handler = logging.StreamHandler(buffer)
    handler.setFormatter(JsonFormatter(**{k: v for k, v in config.items() if k != "()"}))
    handler.addFilter(ContextFilter())
    root = logging.getLogger()
    level = root.level
    root.addHandler(handler)
    root.setLevel(logging.INFO)
    yield buffer
    root.removeHandler(handler)
    root.setLevel(level)


def _lines(buffer: io.StringIO, logger: str) -> list[dict]:
    rows = [json.loads(line) for line in buffer.getvalue().splitlines()]
    return [row for row in rows if row["logger"] == logger]


@pytest.mark.django_db
def test_a_request_logs_one_json_line_with_its_id_user_and_site(editor_client, json_lines):
    site_import(doc=small_site("LOG"))
    response = editor_client.get("/api/v1/sites/LOG/", HTTP_X_REQUEST_ID="req-0042")
    assert response.status_code == 200 and response["X-Request-ID"] == "req-0042"
    (line,) = _lines(json_lines, "loopkeep.request")
    assert line["request_id"] == "req-0042"
    assert (line["user"], line["site"], line["status"]) == ("operator", "LOG", 200)
    assert line["method"] == "GET" and line["path"] == "/api/v1/sites/LOG/"
    assert line["level"] == "INFO" and line["duration_ms"] >= 0 and line["time"]


@pytest.mark.django_db
def test_a_request_id_that_is_not_a_plain_token_is_replaced(editor_client, json_lines):
    response = editor_client.get("/api/v1/sites/", HTTP_X_REQUEST_ID="x\nforged: line")
    rid = response["X-Request-ID"]
    assert len(rid) == 32 and int(rid, 16) >= 0
    (line,) = _lines(json_lines, "loopkeep.request")
    assert line["request_id"] == rid


def test_a_task_logs_its_task_and_run_id_and_clears_them_after(json_lines):
    log = logging.getLogger("analysis.tasks")
    signals.task_prerun.send(
        sender=recompute_chunk, task_id="t-1", task=recompute_chunk, args=(42, 0, [1], False)
    )
    log.info("chunk written")
    signals.task_postrun.send(sender=recompute_chunk, task_id="t-1", task=recompute_chunk)
    log.info("after the task")
    during, after = _lines(json_lines, "analysis.tasks")
    assert (during["task_id"], during["task"], during["run_id"]) == (
        "t-1",
        "analysis.recompute_chunk",
        42,
    )
    assert during["message"] == "chunk written"
    assert (after["task_id"], after["run_id"], after["request_id"]) == (None, None, None)


def test_log_format_is_checked():
    with pytest.raises(ValueError, match="LOG_FORMAT='xml'"):
        logging_config(fmt="xml", level="INFO")
