"""Production: no default secret (a placeholder or short one refuses to start), HTTPS-only
cookies and HSTS; the entry points refuse to serve while the demo account exists
(``config.accounts``). ``check --deploy`` passes."""

import os

from django.core.exceptions import ImproperlyConfigured

from config.logs import logging_config
from config.secret_key import secret_key_problem
from config.settings.base import *  # noqa: F403
from config.settings.base import env_bool, env_list

DEBUG = False
SECRET_KEY = os.environ.get("SECRET_KEY", "")
if _problem := secret_key_problem(SECRET_KEY):
    raise ImproperlyConfigured(_problem)
ALLOWED_HOSTS = env_list("ALLOWED_HOSTS")
CSRF_TRUSTED_ORIGINS = env_list("CSRF_TRUSTED_ORIGINS")

SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")
SECURE_SSL_REDIRECT = env_bool("SECURE_SSL_REDIRECT", True)
# Load balancers and process managers probe these over plain HTTP on the private side.
SECURE_REDIRECT_EXEMPT = [r"^health/$", r"^ready/$"]
SESSION_COOKIE_SECURE = True
CSRF_COOKIE_SECURE = True
SECURE_HSTS_SECONDS = int(os.environ.get("SECURE_HSTS_SECONDS", str(60 * 60 * 24 * 365)))
SECURE_HSTS_INCLUDE_SUBDOMAINS = True
SECURE_HSTS_PRELOAD = True
SECURE_CONTENT_TYPE_NOSNIFF = True
X_FRAME_OPTIONS = "DENY"
LOG_FORMAT = os.environ.get("LOG_FORMAT", "json").strip().lower()
LOGGING = logging_config(fmt=LOG_FORMAT, level=os.environ.get("LOG_LEVEL", "INFO"))
