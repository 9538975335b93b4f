"""The record's outbox (``SiteChange``): "site S changed, it is now at revision N".

Every write that changes a circuit records one row, in its own transaction
(``inventory.services.site_record_change``). The inventory owns the rows and imports nothing of
the apps that act on them: a consumer registers here at start-up (the analysis does so in its
``AppConfig.ready()``) and is called inside the writing transaction with the new row, so it can
schedule its work for when that transaction commits (``transaction.on_commit``). Consumers mark
rows done with :func:`changes_done` once they have acted on them; rows left pending (a lost
send) are found by :func:`changes_due` and sent again by the consumer's periodic sweep.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Iterable, Mapping

from django.db.models import F, Q, QuerySet
from django.utils import timezone

from inventory.choices import ChangeStatus
from inventory.models import Site, SiteChange

ChangeConsumer = Callable[[SiteChange], object]

_consumers: list[ChangeConsumer] = []


def consumer_register(consumer: ChangeConsumer) -> None:
    """Call ``consumer(change)`` in the transaction of every recorded change (once, however
    often it is registered: ``ready()`` may run more than once in tests)."""
    if consumer not in _consumers:
        _consumers.append(consumer)


def consumers() -> tuple[ChangeConsumer, ...]:
    return tuple(_consumers)


def change_record(*, site_id: int) -> SiteChange:
    """Record, in the caller's transaction, that the site is now at its current revision, and
    hand the row to every registered consumer."""
    revision = Site.objects.filter(pk=site_id).values_list("revision", flat=True).get()
    change = SiteChange.objects.create(site_id=site_id, revision=revision)
    for consumer in tuple(_consumers):
        consumer(change)
    return change


def changes_done(*, at: Mapping[int, int]) -> int:
    """Mark done every pending change of a site at or below the revision given for it
    (site id -> revision acted on). Returns the number of rows marked."""
    done = Q()
    for site_id, revision in at.items():
        done |= Q(site_id=site_id, revision__lte=revision)
    if not done:
        return 0
    return SiteChange.objects.filter(done, status=ChangeStatus.PENDING).update(
        status=ChangeStatus.DONE, done_at=timezone.now()
    )


def changes_give_up(*, max_sends: int) -> int:
    """Mark failed the pending changes already sent ``max_sends`` times."""
    return SiteChange.objects.filter(status=ChangeStatus.PENDING, sends__gte=max_sends).update(
        status=ChangeStatus.FAILED
    )


def changes_due(
    *, cutoff: dt.datetime, resend_cutoff: dt.datetime | None = None
) -> QuerySet[SiteChange]:
    """Pending changes never sent since before ``cutoff``, or last sent before
    ``resend_cutoff`` (``cutoff`` when not given); per site, newest first."""
    resend = cutoff if resend_cutoff is None else resend_cutoff
    return (
        SiteChange.objects.filter(status=ChangeStatus.PENDING)
        .filter(Q(sent_at__isnull=True, created_at__lte=cutoff) | Q(sent_at__lte=resend))
        .order_by("site_id", "-revision", "-id")
    )


def changes_sent(*, ids: Iterable[int]) -> None:
    """The consumer handed these (still pending) changes on once more."""
    SiteChange.objects.filter(pk__in=list(ids), status=ChangeStatus.PENDING).update(
        sent_at=timezone.now(), sends=F("sends") + 1
    )
