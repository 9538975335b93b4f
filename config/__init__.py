"""Loopkeep project configuration. The Celery app is loaded with Django so that
``shared_task`` tasks bind to it."""

from config.celery import app as celery_app

__all__ = ("celery_app",)
