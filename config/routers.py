"""Read replica routing: the API's reads go to the ``replica`` database alias, every write and
everything after a write (in the same request) to the primary.

A request opts in (``replica_reads()``, entered by ``config.middleware.RequestContextMiddleware``
for the safe methods of ``/api/``); everything else (workers, commands, the admin, writes)
never leaves the primary. Inside a request that opted in, reads go to the replica until the
request writes: ``db_for_write`` pins the rest of the request to the primary, so it reads its
own writes. A read inside a transaction of the primary also stays there (``select_for_update``
and the service functions read what they are about to write).

The pin is a ``contextvars.ContextVar``: per thread under gunicorn's threads, per task under
asyncio, never shared between requests.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from contextvars import ContextVar
from typing import Any

from django.conf import settings
from django.db import DEFAULT_DB_ALIAS, connections

from config.database import REPLICA

# "primary": every read on the primary; "replica": reads may go to the replica; "pinned": this
# request wrote, so its reads stay on the primary from now on.
_reads: ContextVar[str] = ContextVar("loopkeep_db_reads", default="primary")


def replica_enabled() -> bool:
    return (
        bool(getattr(settings, "LOOPKEEP_REPLICA_READS", False)) and REPLICA in settings.DATABASES
    )


@contextlib.contextmanager
def replica_reads() -> Iterator[None]:
    """Let the reads in this block go to the replica (until the block writes)."""
    token = _reads.set("replica")
    try:
        yield
    finally:
        _reads.reset(token)


def pinned() -> bool:
    """Whether the current request wrote and now reads from the primary."""
    return _reads.get() == "pinned"


def _in_transaction() -> bool:
    """Whether the code runs in a transaction of the primary (the test runner's own wrapping
    transaction, marked ``_from_testcase`` by Django, does not count)."""
    blocks = connections[DEFAULT_DB_ALIAS].atomic_blocks
    return any(not getattr(block, "_from_testcase", False) for block in blocks)


class PrimaryReplicaRouter:
    """``DATABASE_ROUTERS`` entry. Inactive (everything on the primary) unless the settings
    enable replica reads and define the ``replica`` alias."""

    def db_for_read(self, model: Any, **hints: Any) -> str:
        if _reads.get() == "replica" and replica_enabled() and not _in_transaction():
            return REPLICA
        return DEFAULT_DB_ALIAS

    def db_for_write(self, model: Any, **hints: Any) -> str:
        # Explicit: Django would otherwise write an object back to the database it was read
        # from, which may be the replica.
        if _reads.get() == "replica":
            _reads.set("pinned")
        return DEFAULT_DB_ALIAS

    def allow_relation(self, obj1: Any, obj2: Any, **hints: Any) -> bool | None:
        both = {obj1._state.db, obj2._state.db}
        return True if both <= {DEFAULT_DB_ALIAS, REPLICA, None} else None

    def allow_migrate(self, db: str, app_label: str, **hints: Any) -> bool | None:
        return None
