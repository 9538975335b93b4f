"""Accounts the service must not be started with, and the demo login's limits.

The demo (``make demo``) creates the login ``demo``/``demo`` so the admin can be opened at once.
That account is for the embedded SQLite demo database on a DEBUG machine only:

- ``load_demo`` creates it only there (``demo_account_allowed``);
- :class:`DemoAwareBackend` refuses it whenever DEBUG is off, wherever it came from;
- the production entry points (``config.wsgi``, ``config.asgi``) refuse to start while it
  exists (:func:`refuse_unsafe_start`), as ``config.settings.production`` refuses a placeholder
  or short ``SECRET_KEY``;
- ``manage.py check --deploy`` reports it as the error ``loopkeep.E001``
  (:func:`check_demo_account`, registered by ``InventoryConfig.ready``), so a release script
  stops before the service is started at all.
"""

from __future__ import annotations

from typing import Any

from django.conf import settings
from django.contrib.auth import get_user_model
from django.contrib.auth.backends import ModelBackend
from django.core import checks
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


_DELETE_HINT = (
    f'manage.py shell -c "from django.contrib.auth import get_user_model; '
    f"get_user_model().objects.filter(username='{DEMO_USERNAME}').delete()\""
)


def _demo_account_unsafe() -> bool:
    """Whether the demo account exists while DEBUG is off. A database that cannot be read yet
    (not migrated, not reachable) is left to the service's own errors: False."""
    if settings.DEBUG:
        return False
    try:
        return get_user_model().objects.filter(username=DEMO_USERNAME).exists()
    except DatabaseError:
        return False


def refuse_unsafe_start() -> None:
    """Raise ``ImproperlyConfigured`` when the service is about to serve with the demo
    account present (DEBUG off). Called by the WSGI and ASGI entry points after setup."""
    if _demo_account_unsafe():
        raise ImproperlyConfigured(
            f"the demo account {DEMO_USERNAME!r} exists in this database; delete it "
            f"({_DELETE_HINT}) before serving with DEBUG off"
        )


def check_demo_account(app_configs: Any = None, **kwargs: Any) -> list[checks.CheckMessage]:
    """The deploy system check (``check --deploy``, tag ``security``): an error while the demo
    account exists with DEBUG off, the state in which the entry points refuse to serve."""
    if not _demo_account_unsafe():
        return []
    return [
        checks.Error(
            f"the demo account {DEMO_USERNAME!r} exists in this database "
            "and DEBUG is off; the web entry points refuse to serve while it exists",
            hint=f"delete it: {_DELETE_HINT}",
            obj=DEMO_USERNAME,
            id="loopkeep.E001",
        )
    ]
