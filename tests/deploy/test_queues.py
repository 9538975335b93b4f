"""Queues per kind of work (config/settings/base.py): where each task goes, and on Redis that a
chunk waits behind an edit's run in one queue (kombu's Redis transport serves priority 0 first:
kombu docs, "Redis message priorities"), which is what a fleet worker that also serves
``recompute`` sees."""

from __future__ import annotations

import pytest

from analysis.tasks import recompute_chunk, recompute_run
from config.celery import app


@pytest.mark.parametrize(
    ("task", "queue", "priority"),
    [
        ("analysis.recompute_run", "recompute", None),
        ("analysis.recompute_chunk", "fleet", 6),
        ("analysis.sweep_requests", "recompute", None),
        ("analysis.recompute_fleet", "recompute", None),
        ("analysis.prune_results", "default", None),
        ("inventory.tasks.import_site_file", "imports", None),
        ("inventory.run_import_job", "imports", None),
        ("inventory.sweep_import_jobs", "recompute", None),
        ("inventory.prune_import_jobs", "default", None),
        ("celery.ping", "default", None),
    ],
)
def test_task_routes(task, queue, priority):
    route = app.amqp.router.route({}, task)
    assert route["queue"].name == queue
    assert route.get("priority") == priority


def test_a_worker_without_queues_consumes_all_four():
    assert set(app.amqp.queues) == {"default", "recompute", "fleet", "imports"}


@pytest.mark.broker
def test_an_edit_run_overtakes_queued_fleet_chunks():
    before = app.conf.task_always_eager
    app.conf.task_always_eager = False
    try:
        app.control.purge()
        recompute_chunk.delay(1, 9, [9], True)  # routed: the fleet queue
        for index in range(3):  # the same chunks sent to the recompute queue: behind the edit
            recompute_chunk.apply_async((1, index, [index], True), queue="recompute")
        recompute_run.delay(77)
        with app.connection_for_read() as conn:
            queue = conn.SimpleQueue("recompute", no_ack=True)
            first = queue.get(timeout=5)
            names = [first.headers["task"]]
            names += [queue.get(timeout=5).headers["task"] for _ in range(3)]
            queue.close()
            fleet = conn.SimpleQueue("fleet", no_ack=True)
            routed = fleet.get(timeout=5)
            fleet.close()
        assert first.payload[0] == [77], first.payload
        assert names == ["analysis.recompute_run"] + ["analysis.recompute_chunk"] * 3
        assert routed.payload[0] == [1, 9, [9], True]
    finally:
        app.control.purge()
        app.conf.task_always_eager = before
