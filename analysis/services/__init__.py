"""Writes of the analysis app, one module per concept:

- ``outbox``: the consumer of the record's outbox (``inventory.changes``, ``SiteChange`` rows)
  and its sweep;
- ``runs``: run rows and their chunks (read, compute, write, count once; the heartbeat);
- ``liveness``: the stall sweep (chunks whose heartbeat stopped, runs and messages lost);
- ``results``: the results writer (the bulk replacement of a site's stored results).

The flow: an edit records a change in the inventory's outbox inside its own transaction; the
inventory hands the row to its registered consumers, and ``site_change_consume`` (registered by
``AnalysisConfig.ready()``) adds a site run row and sends the task when the edit commits. The
task reads the site record, runs the engine and calls ``results_replace``, which in one
transaction locks the site rows, refuses to replace newer results with older ones, swaps the
site's result rows (COPY on PostgreSQL, ``bulk_create`` elsewhere), marks the outbox rows done
and counts the run's progress. If the send is lost (broker down), ``requests_sweep`` sends it
again.

Callers import from here (``from analysis import services``); the names below are the API.
"""

from analysis.services.liveness import runs_sweep
from analysis.services.outbox import (
    recompute_deferred,
    requests_sweep,
    send_run,
    site_change_consume,
)
from analysis.services.results import (
    RESULT_MODELS,
    RESULTS_NOT_COMPUTED,
    WriteOutcome,
    _insert,
    _result_rows,
    results_replace,
)
from analysis.services.runs import (
    ChunkOutcome,
    _compute,
    chunk_begin,
    chunk_heartbeat,
    chunk_recompute,
    chunk_sites,
    fleet_chunks,
    fleet_recompute,
    run_chunks,
    run_create,
    run_dispatch,
    run_fail,
    run_finish,
    run_plan,
    run_started,
)

__all__ = [
    "RESULTS_NOT_COMPUTED",
    "RESULT_MODELS",
    "ChunkOutcome",
    "WriteOutcome",
    "_compute",
    "_insert",
    "_result_rows",
    "chunk_begin",
    "chunk_heartbeat",
    "chunk_recompute",
    "chunk_sites",
    "fleet_chunks",
    "fleet_recompute",
    "recompute_deferred",
    "requests_sweep",
    "results_replace",
    "run_chunks",
    "run_create",
    "run_dispatch",
    "run_fail",
    "run_finish",
    "run_plan",
    "run_started",
    "runs_sweep",
    "send_run",
    "site_change_consume",
]
