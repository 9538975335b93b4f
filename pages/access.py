"""Who may see and do what on the pages: the API's roles (``api.roles``), nothing else.

- an anonymous visitor is sent to the login page (no page shows data without a login);
- ``viewer`` reads, and runs the checks and plans that store nothing;
- ``editor`` also saves (procedures, plans saved as procedures).

A signed-in user with no role sees a page that says so (403), never data.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import wraps
from typing import Any

from django.contrib.auth.views import redirect_to_login
from django.http import HttpRequest, HttpResponse
from django.shortcuts import render

from api.roles import EDITOR, VIEWER, has_role, role_of


def role_required(
    role: str,
) -> Callable[[Callable[..., HttpResponse]], Callable[..., HttpResponse]]:
    """A view decorator: a login, then ``role`` or a higher one."""

    def decorate(view: Callable[..., HttpResponse]) -> Callable[..., HttpResponse]:
        @wraps(view)
        def wrapped(request: HttpRequest, *args: Any, **kwargs: Any) -> HttpResponse:
            if not request.user.is_authenticated:
                return redirect_to_login(request.get_full_path())
            if not has_role(request.user, role):
                return render(request, "pages/no_role.html", {"needed": role}, status=403)
            return view(request, *args, **kwargs)

        return wrapped

    return decorate


viewer_required = role_required(VIEWER)
editor_required = role_required(EDITOR)


def roles(request: HttpRequest) -> dict[str, Any]:
    """Template context: the user's role and whether the page may offer writes."""
    user = getattr(request, "user", None)
    if user is None or not user.is_authenticated:
        return {"role": None, "can_edit": False}
    return {"role": role_of(user), "can_edit": has_role(user, EDITOR)}
