"""Accounts the service must not be started with, and the demo login's limits.

The demo (``make demo``) creates the login ``demo``/``demo`` so the admin can be opened at once.
That account is for the embedded SQLite demo database on a DEBUG machine only:

- ``load_demo`` creates it only there (``demo_account_allowed``);
- :class:`DemoAwareBackend` refuses it whenever DEBUG is off, wherever it came from;
- the production entry points (``config.wsgi``, ``config.asgi``) refuse to start while it
  exists (:func:`refuse_unsafe_start`), as ``config.settings.production`` refuses a placeholder
  or short ``SECRET_KEY``.
"""

from __future__ import annotations

from typing import Any

from django.conf import settings
from django.contrib.auth import get_user_model
from django.contrib.auth.backends import ModelBackend
from django.core.exceptions import ImproperlyConfigured
from django.db import DatabaseError, connection

DEMO_USERNAME = "demo"


def demo_account_allowed() -> bool:
    """Whether the demo login may exist here: DEBUG on and the embedded SQLite database."""
    return bool(settings.DEBUG) and connection.vendor == "sqlite"


class DemoAwareBackend(ModelBackend):
    """Django's username/password check, except that the demo login works only with DEBUG on
    (a database copied from a demo machine, or DEBUG turned off, locks it out)."""

    def user_can_authenticate(self, user: Any) -> bool:
        if getattr(user, "username", None) == DEMO_USERNAME and not settings.DEBUG:
            return False
        return super().user_can_authenticate(user)


def refuse_unsafe_start() -> None:
    """Raise ``ImproperlyConfigured`` when the service is about to serve with the demo
    account present (DEBUG off). Called by the WSGI and ASGI entry points after setup; a
    database that cannot be read yet (not migrated) is left to the service's own errors."""
    if settings.DEBUG:
        return
    try:
        present = get_user_model().objects.filter(username=DEMO_USERNAME).exists()
    except DatabaseError:
        return
    if present:
        raise ImproperlyConfigured(
            f"the demo account {DEMO_USERNAME!r} exists in this database; delete it "
            f'(manage.py shell -c "from django.contrib.auth import get_user_model; '
            f"get_user_model().objects.filter(username='{DEMO_USERNAME}').delete()\") "
            "before serving with DEBUG off"
        )
