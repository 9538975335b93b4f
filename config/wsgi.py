"""WSGI entry point (gunicorn)."""

import os

from django.core.wsgi import get_wsgi_application

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings.production")

application = get_wsgi_application()

from config.accounts import refuse_unsafe_start  # noqa: E402 (needs the apps loaded)

refuse_unsafe_start()
