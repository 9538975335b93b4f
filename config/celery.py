"""The Celery application.

With ``CELERY_BROKER_URL`` unset (the embedded default) tasks run in-process, eagerly, so the demo
works with no other server; with it set, the same tasks run on real workers.
"""

import os

from celery import Celery

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings.local")

app = Celery("loopkeep")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks()
