"""Test settings: the environment's database (PostgreSQL in CI, SQLite otherwise)."""

from config.settings.base import *  # noqa: F403

DEBUG = False
SECRET_KEY = "loopkeep-tests-not-secret"
PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]
LOGGING = {"version": 1, "disable_existing_loggers": False}
