"""Writes of the analysis app: recompute requests (the outbox) and result replacement.

Placeholder until the background-jobs work lands: a request is recorded nowhere yet.
"""

from __future__ import annotations


def recompute_request(*, site_id: int) -> None:
    """Record that the site's results must be recomputed (outbox row, enqueued on commit)."""
    return None
