"""Local development and the demo: DEBUG on, a fixed development secret."""

from config.settings.base import *  # noqa: F403
from config.settings.base import env_bool

DEBUG = env_bool("DEBUG", True)
SECRET_KEY = SECRET_KEY or "loopkeep-local-development-only-not-secret"  # noqa: F405
