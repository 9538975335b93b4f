"""Test settings: the environment's database (PostgreSQL in CI, SQLite otherwise)."""

from config.settings.base import *  # noqa: F403

DEBUG = False
SECRET_KEY = "loopkeep-tests-not-secret"
PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]
LOGGING = {"version": 1, "disable_existing_loggers": False}

# On PostgreSQL, a second database on the same server stands in for a read replica: a separate
# test database (no TEST MIRROR), created only for the tests that ask for it
# (``django_db(databases=[...])``). Replica reads stay off unless a test turns them on.
if DATABASES["default"]["ENGINE"] == "django.db.backends.postgresql":  # noqa: F405
    DATABASES["replica"] = {  # noqa: F405
        **DATABASES["default"],  # noqa: F405
        "NAME": f"{DATABASES['default']['NAME']}_replica",  # noqa: F405
        "TEST": {"NAME": f"test_{DATABASES['default']['NAME']}_replica"},  # noqa: F405
    }
LOOPKEEP_REPLICA_READS = False
