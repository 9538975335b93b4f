"""The three roles of the API, kept as Django groups (created by a migration).

- ``viewer``: reads everything, and runs the checks, plans and what-ifs that store nothing;
- ``editor``: a viewer who also writes the record (imports, tap changes, edits);
- ``admin``: everything an editor does; superusers count as admins.

A signed-in user in none of these groups is refused (403): an account alone grants nothing.
"""

from __future__ import annotations

from typing import Any

VIEWER = "viewer"
EDITOR = "editor"
ADMIN = "admin"
ROLES = (VIEWER, EDITOR, ADMIN)
_RANK = {VIEWER: 1, EDITOR: 2, ADMIN: 3}


def role_of(user: Any) -> str | None:
    """The highest role of ``user`` (None when it has none). Cached on the user object, so a
    request asks the database at most once."""
    if not getattr(user, "is_authenticated", False) or not user.is_active:
        return None
    if user.is_superuser:
        return ADMIN
    cached = getattr(user, "_loopkeep_role", False)
    if cached is not False:
        return cached
    names = set(user.groups.filter(name__in=ROLES).values_list("name", flat=True))
    role = max(names, key=_RANK.__getitem__) if names else None
    user._loopkeep_role = role
    return role


def has_role(user: Any, needed: str) -> bool:
    """Whether ``user`` holds ``needed`` or a higher role."""
    role = role_of(user)
    return role is not None and _RANK[role] >= _RANK[needed]
