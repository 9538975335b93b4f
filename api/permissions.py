"""One permission class for every endpoint (the default in settings): a signed-in user with a
role. Reads, and actions that store nothing (procedure checks, plans, what-ifs), need
``viewer``; writes need ``editor``. A view raises its need with ``required_role``."""

from __future__ import annotations

from rest_framework.permissions import SAFE_METHODS, BasePermission

from api.roles import EDITOR, VIEWER, has_role


class RolePermission(BasePermission):
    message = "your account has no role that allows this (roles: viewer, editor, admin)"

    def has_permission(self, request, view) -> bool:
        if not (request.user and request.user.is_authenticated):
            return False
        needed = getattr(view, "required_role", None)
        if needed is None:
            stores_nothing = request.method in SAFE_METHODS or getattr(
                view, "stores_nothing", False
            )
            needed = VIEWER if stores_nothing else EDITOR
        return has_role(request.user, needed)
