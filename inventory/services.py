"""Writes to the physical record. One service per write, each one transaction.

``site_import`` is the one way a whole site comes in (site file, spreadsheet, tests): it
validates the document first (every error, with its JSON pointer) and writes nothing when
anything is wrong; otherwise it upserts by natural key inside one transaction: coded objects and
keyed children are updated in place, created or deleted, so history shows what really changed.
A change of a CT's terminals in use is recorded as a ``TapChange`` event.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from django.db import transaction
from django.db.models import F, Q
from django.utils import timezone

from inventory import models
from inventory.sitefile.importer import ImportResult, SiteImportError, upsert_site

__all__ = ["ImportResult", "SiteImportError", "ct_change_tap", "site_import", "site_record_change"]


class _DryRunRollback(Exception):
    pass


def site_import(*, doc: dict, dry_run: bool = False, user: Any = None) -> ImportResult:
    """Validate a ``loopkeep.site/1`` document and upsert the site it describes, atomically.

    Raises ``SiteImportError`` with every error (``JSON-pointer: what is wrong``) and writes
    nothing when the document is not valid. With ``dry_run`` the import runs to the end inside
    the transaction and is rolled back, so the counts say what it would do. The sections are
    written by ``inventory.sitefile.importer``; a changed site gets a new revision and a
    recompute request in the same transaction.
    """
    from inventory.sitefile.validate import validate_site_document

    errors = validate_site_document(doc)
    if errors:
        raise SiteImportError(errors)
    result = ImportResult(site=doc["site"]["code"], dry_run=dry_run)
    try:
        with transaction.atomic():
            site_id = upsert_site(doc, result, user)
            if result.changed:
                site_record_change(site_id=site_id)
            if dry_run:
                raise _DryRunRollback
    except _DryRunRollback:
        pass
    return result


def site_record_change(*, site_id: int) -> None:
    """Mark a site's circuits as changed, inside the caller's transaction: its revision goes
    up (every result computed from the old revision is stale from the moment this commits) and
    a recompute is requested (an outbox row, and the job scheduled on commit)."""
    from analysis.services import recompute_request

    models.Site.objects.filter(pk=site_id).update(revision=F("revision") + 1)
    recompute_request(site_id=site_id)


@transaction.atomic
def ct_change_tap(
    *,
    ct: models.CurrentTransformer,
    to: tuple[str, str],
    by: str = "",
    reason: str = "",
    at: dt.datetime | None = None,
    move_leads: bool = False,
) -> models.TapChange:
    """Change the terminals in use of a CT and record the event.

    With ``move_leads`` the wires, links and grounds landed on the old terminals in use are
    re-landed on the new ones (first on first, second on second), as a crew does when it
    re-taps a CT; without it only the record of the tap changes, and the check then reports
    the new tap open until the wiring is brought in line."""
    ct = models.CurrentTransformer.objects.select_for_update().get(pk=ct.pk)
    own = {t.name: t for t in models.Terminal.objects.filter(ct=ct)}
    first, second = to
    if first == second or first not in own or second not in own:
        from django.core.exceptions import ValidationError

        raise ValidationError(
            {
                "in_use": f"terminals in use must be two different terminals of {ct.code} "
                f"({', '.join(sorted(own))}), got {first}-{second}"
            }
        )
    previous = [
        next((t.name for t in own.values() if t.tap_role == role), None)
        for role in ("first", "second")
    ]
    roles = {first: "first", second: "second"}
    if move_leads and None not in previous:
        _reland(own, dict(zip(previous, (first, second), strict=True)))
    moving = [t for t in own.values() if t.tap_role != roles.get(t.name, "")]
    # Clear first (one role per CT is checked row by row), then save each row so that history
    # records the change.
    models.Terminal.objects.filter(pk__in=[t.pk for t in moving]).update(tap_role="")
    for terminal in moving:
        terminal.tap_role = roles.get(terminal.name, "")
        terminal.save(update_fields=["tap_role"])
    change = models.TapChange.objects.create(
        ct=ct,
        from_tap=previous,
        to_tap=[first, second],
        changed_at=at or timezone.now(),
        changed_by=by,
        reason=reason,
    )
    site_record_change(site_id=ct.site_id)
    return change


def _reland(own: dict[str, models.Terminal], moves: dict[str, str]) -> None:
    """Move every wire, link and ground end from the old terminals of a CT to the new ones
    (all moves at once, so a swap of the two ends stays a swap). Each row is saved one by one
    so that its history records the move."""
    old_to_new = {own[a].pk: own[b] for a, b in moves.items() if a != b}
    if not old_to_new:
        return
    ids = list(old_to_new)
    for model, ends in (
        (models.Wire, ("from_terminal", "to_terminal")),
        (models.Link, ("a", "b")),
        (models.Ground, ("terminal",)),
    ):
        query = Q()
        for end in ends:
            query |= Q(**{f"{end}_id__in": ids})
        for row in model.objects.filter(query):
            for end in ends:
                new = old_to_new.get(getattr(row, f"{end}_id"))
                if new is not None:
                    setattr(row, end, new)
            row.save()
